package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"weft/checkpoint"
	"weft/configs"
	"weft/data"
)

// The layout of a run directory, documented in the README.
const (
	runConfigFile  = "run.toml"   // the resolved run file the run uses
	splitFile      = "split.json" // the split report
	metricsFile    = "metrics.jsonl"
	checkpointsDir = "checkpoints"
	baselinesDir   = "baselines"
	reportDir      = "report"
)

// runDir is an opened run directory.
type runDir struct {
	Path string
	lock *checkpoint.DirLock
}

// openRunDir creates dir when it does not exist and takes its lock. A
// directory held by another live process is an error naming the holder.
func openRunDir(dir string) (*runDir, error) {
	if dir == "" {
		return nil, usagef("--run DIR is required")
	}
	if fi, err := os.Stat(dir); err == nil && !fi.IsDir() {
		return nil, fmt.Errorf("run directory %s: not a directory", dir)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("run directory %s: %w", dir, unwrapPath(err))
	}
	l, err := checkpoint.Lock(dir)
	if err != nil {
		var le *checkpoint.LockedError
		if errors.As(err, &le) {
			return nil, fmt.Errorf("run directory %s is in use by %s; wait for it to finish or stop it", dir, le.Holder)
		}
		return nil, fmt.Errorf("run directory %s: %w", dir, err)
	}
	return &runDir{Path: dir, lock: l}, nil
}

func (r *runDir) Close() error {
	if r == nil || r.lock == nil {
		return nil
	}
	return r.lock.Unlock()
}

func (r *runDir) file(name string) string { return filepath.Join(r.Path, name) }

// writeFileAtomic writes b to path through a temporary file and a rename, so
// that a crash leaves either the old or the new file.
func writeFileAtomic(path string, b []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("write %s: %w", path, unwrapPath(err))
	}
	name := tmp.Name()
	if err := tmp.Chmod(0o644); err != nil {
		tmp.Close()
		os.Remove(name)
		return fmt.Errorf("write %s: %w", path, unwrapPath(err))
	}
	_, err = tmp.Write(b)
	if err == nil {
		err = tmp.Sync()
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(name, path)
	}
	if err != nil {
		os.Remove(name)
		return fmt.Errorf("write %s: %w", path, unwrapPath(err))
	}
	return nil
}

func writeJSONAtomic(path string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return err
	}
	return writeFileAtomic(path, append(b, '\n'))
}

// unwrapPath drops the *os.PathError wrapper when the caller names the path
// itself, so messages do not repeat it.
func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// prepareData runs the corpus pipeline for a run, caching the encoded
// tokens in the run directory when there is one, and saves the vocabulary
// and the split report beside them.
func prepareData(cmdCtx cmdContext, r *configs.Run, rd *runDir) (*data.Dataset, error) {
	cacheDir := ""
	if rd != nil {
		cacheDir = rd.Path
	}
	ds, err := data.PrepareEnv(cmdCtx.ctx, r.Data, data.Env{CacheDir: cacheDir, Stdin: cmdCtx.In})
	if err != nil {
		return nil, err
	}
	if rd != nil {
		if err := ds.Vocab.WriteFile(rd.file(data.VocabFile)); err != nil {
			return nil, err
		}
		if err := writeJSONAtomic(rd.file(splitFile), ds.Report); err != nil {
			return nil, err
		}
	}
	return ds, nil
}
