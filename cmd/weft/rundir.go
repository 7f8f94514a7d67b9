package main

import (
	"errors"
	"fmt"
	"os"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/data/atomicfile"
)

// openRunDir opens and locks a run directory for a verb (runs.Open), with
// the flag a user must give when there is none.
func openRunDir(dir string) (*runs.Dir, error) {
	if dir == "" {
		return nil, usagef("--run DIR is required")
	}
	return runs.Open(dir)
}

// prepareData runs the corpus pipeline of a run, caching it in the run
// directory when there is one (runs.Prepare).
func prepareData(cc cmdContext, r *configs.Run, rd *runs.Dir) (*data.Dataset, error) {
	return runs.Prepare(cc.ctx, r, rd, cc.In)
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

// writeFileAtomic writes b to path through atomicfile, naming path in the
// error.
func writeFileAtomic(path string, b []byte) error {
	if err := atomicfile.WriteBytes(path, b); err != nil {
		return fmt.Errorf("write %s: %w", path, unwrapPath(err))
	}
	return nil
}
