package runs

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"

	"weft/checkpoint"
	"weft/configs"
	"weft/data"
	"weft/data/atomicfile"
)

// Dir is a run directory held by this process: Open takes its lock, Close
// releases it. Everything a run writes goes through its methods or through
// atomicfile, so that a crash, a full disk or a second process never costs
// a file already saved.
type Dir struct {
	Layout
	lock    *DirLock
	created bool // Open made the directory
}

// Open creates the run directory path when it does not exist and takes its
// lock. A directory held by another live process is an error wrapping
// ErrLocked that names the holder.
func Open(path string) (*Dir, error) {
	fi, err := os.Stat(path)
	if err == nil && !fi.IsDir() {
		return nil, fmt.Errorf("run directory %s: not a directory", path)
	}
	created := err != nil
	if err := os.MkdirAll(path, 0o755); err != nil {
		return nil, fmt.Errorf("run directory %s: %w", path, unwrapPath(err))
	}
	l, err := Lock(path)
	if err != nil {
		var le *LockedError
		if errors.As(err, &le) {
			return nil, &inUseError{msg: fmt.Sprintf("run directory %s is in use by %s; wait for it to finish or stop it", path, le.Holder), err: err}
		}
		return nil, fmt.Errorf("run directory %s: %w", path, err)
	}
	return &Dir{Layout: Layout(path), lock: l, created: created}, nil
}

// inUseError is Open's error for a directory another process holds: its
// message names the holder, and it wraps the *LockedError (so ErrLocked).
type inUseError struct {
	msg string
	err error
}

func (e *inUseError) Error() string { return e.msg }
func (e *inUseError) Unwrap() error { return e.err }

// Path returns the run directory's path as given to Open.
func (d *Dir) Path() string { return string(d.Layout) }

// Close releases the lock. Calling it again, or on nil, does nothing.
func (d *Dir) Close() error {
	if d == nil || d.lock == nil {
		return nil
	}
	return d.lock.Unlock()
}

// WriteJSON writes v, indented, to the file name of the run directory,
// atomically.
func (d *Dir) WriteJSON(name string, v any) error {
	return writeJSON(d.File(name), v)
}

func writeJSON(path string, v any) error {
	if err := atomicfile.WriteJSON(path, v, "  "); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}

// unwrapPath drops the *os.PathError wrapper when the caller names the path
// itself, so that messages do not repeat it.
func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// DamagedCache is the one line that says a run's token cache was not
// trusted and was encoded again from the corpus (nothing was lost: the
// cache is derived from it).
func DamagedCache(why error) string {
	return fmt.Sprintf("token cache was damaged and has been rebuilt: %s", oneLine(why.Error()))
}

// Prepare runs the corpus pipeline of r: it reads, tokenizes, splits and
// encodes the corpus. With d non-nil the encoded tokens are cached in the
// run directory (and reused while the inputs and settings are unchanged),
// and the vocabulary and the split report are saved beside them. stdin is
// read when the run file names "-".
func Prepare(ctx context.Context, r *configs.Run, d *Dir, stdin io.Reader) (*data.Dataset, error) {
	cacheDir := ""
	if d != nil {
		cacheDir = d.Path()
		// Spool files of an encoding that a crash interrupted (they can
		// be as large as the cache); the lock says no one else writes here.
		if _, err := atomicfile.CleanTemp(cacheDir); err != nil {
			return nil, err
		}
	}
	ds, err := data.PrepareEnv(ctx, r.Data, data.Env{CacheDir: cacheDir, Stdin: stdin})
	if err != nil {
		return nil, err
	}
	if d != nil {
		if err := ds.Vocab.WriteFile(d.Vocab()); err != nil {
			return nil, err
		}
		if err := writeJSON(d.SplitFile(), splitFile{FileHeader: splitHeader, Report: ds.Report}); err != nil {
			return nil, err
		}
	}
	return ds, nil
}

// WriteRunFile saves r, with its corpus paths made absolute, as the run
// directory's resolved run file (what Train compares on resume and what the
// verbs that take a run directory read), and returns its bytes.
func (d *Dir) WriteRunFile(r *configs.Run) ([]byte, error) {
	abs, err := absoluteFiles(r)
	if err != nil {
		return nil, err
	}
	b, err := configs.Encode(abs)
	if err != nil {
		return nil, err
	}
	if err := atomicfile.WriteBytes(d.RunFile(), b); err != nil {
		return nil, fmt.Errorf("write %s: %w", d.RunFile(), err)
	}
	return b, nil
}

// ReadRunFile loads the resolved run file saved in the run directory dir,
// with the overrides sets applied. A directory without one is not a run
// directory.
func ReadRunFile(dir string, sets []string) (*configs.Run, error) {
	path := Layout(dir).RunFile()
	if _, err := os.Stat(path); err != nil {
		return nil, fmt.Errorf("%s is not a run directory (no %s): train or prepare into it first, or pass a run file", dir, RunFile)
	}
	return configs.Load(path, sets)
}

// OpenModel loads a model from the checkpoints of the run directory dir:
// which is "best" (the default when empty), "latest", a step number or a
// file name inside its checkpoints folder (see checkpoint.OpenModelIn).
func OpenModel(dir, which string) (*checkpoint.Model, error) {
	if fi, err := os.Stat(dir); err != nil {
		return nil, fmt.Errorf("run directory %s: %w", dir, unwrapPath(err))
	} else if !fi.IsDir() {
		return nil, fmt.Errorf("run directory %s: not a directory", dir)
	}
	ck := Layout(dir).Checkpoints()
	if fi, err := os.Stat(ck); err != nil || !fi.IsDir() {
		return nil, fmt.Errorf("run directory %q has no %s folder (has it been trained?)", dir, CheckpointsDir)
	}
	return checkpoint.OpenModelIn(ck, which)
}

// The split report file: data.Report with a format name and version, which
// ReadSplitReport checks. Version 0 is the report as weft wrote it before
// the file had a version (the same keys, without format and version).
var splitHeader = data.FileHeader{Format: "weft-split", Version: 1}

type splitFile struct {
	data.FileHeader
	data.Report
}

// ReadSplitReport reads the split report of the run directory dir.
func ReadSplitReport(dir string) (data.Report, error) {
	path := Layout(dir).SplitFile()
	b, err := os.ReadFile(path)
	if err != nil {
		return data.Report{}, fmt.Errorf("split report: %w", err)
	}
	var f splitFile
	if err := json.Unmarshal(b, &f); err != nil {
		return data.Report{}, fmt.Errorf("split report %s: %w", path, err)
	}
	if err := f.Check(path, splitHeader, true); err != nil {
		return data.Report{}, err
	}
	return f.Report, nil
}
