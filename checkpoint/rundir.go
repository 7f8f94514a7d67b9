package checkpoint

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
)

// File names inside a run directory.
const (
	// Ext ends every checkpoint file name.
	Ext = ".safetensors"
	// BestName is the copy of the checkpoint with the best validation score.
	BestName = "best" + Ext
	// stepPrefix starts a periodic checkpoint's name: step-000001200.safetensors.
	stepPrefix = "step-"
)

// ErrNoCheckpoint is returned by LoadNewestValid for a directory that holds
// no periodic checkpoint at all.
var ErrNoCheckpoint = errors.New("no checkpoint")

// StepName returns the file name of the periodic checkpoint taken after
// step optimizer steps: "step-" and the step zero-padded to nine digits
// (more when needed), then Ext. It panics on a negative step.
func StepName(step int64) string {
	if step < 0 {
		panic(fmt.Sprintf("checkpoint: negative step %d", step))
	}
	return fmt.Sprintf("%s%09d%s", stepPrefix, step, Ext)
}

// StepPath returns filepath.Join(dir, StepName(step)).
func StepPath(dir string, step int64) string { return filepath.Join(dir, StepName(step)) }

// BestPath returns filepath.Join(dir, BestName).
func BestPath(dir string) string { return filepath.Join(dir, BestName) }

// ParseStepName returns the step of a periodic checkpoint's file name, and
// false for any other name (only names StepName produces are recognised).
func ParseStepName(name string) (int64, bool) {
	digits, ok := strings.CutPrefix(name, stepPrefix)
	if !ok {
		return 0, false
	}
	if digits, ok = strings.CutSuffix(digits, Ext); !ok || digits == "" || strings.Trim(digits, "0123456789") != "" {
		return 0, false
	}
	step, err := strconv.ParseInt(digits, 10, 64)
	if err != nil || StepName(step) != name {
		return 0, false
	}
	return step, true
}

// Entry is one periodic checkpoint in a run directory.
type Entry struct {
	Step int64
	Path string
}

// List returns the periodic checkpoints in dir, newest (highest step)
// first. It ignores the best copy, temporary files and every other name.
func List(dir string) ([]Entry, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("list checkpoints in %q: %w", dir, err)
	}
	var out []Entry
	for _, e := range ents {
		if !e.Type().IsRegular() {
			continue
		}
		if step, ok := ParseStepName(e.Name()); ok {
			out = append(out, Entry{Step: step, Path: filepath.Join(dir, e.Name())})
		}
	}
	slices.SortFunc(out, func(a, b Entry) int {
		switch {
		case a.Step > b.Step:
			return -1
		case a.Step < b.Step:
			return 1
		}
		return 0
	})
	return out, nil
}

// LoadNewestValid loads the newest periodic checkpoint in dir that passes
// Load's verification. Damaged newer ones (errors wrapping ErrCorrupt) are
// skipped and their errors returned in skipped, newest first, for the
// caller to report. It stops with an error, without falling back, on a
// checkpoint of an unsupported version (ErrVersion: a newer weft wrote the
// directory) or an I/O error other than damage. With no periodic
// checkpoint at all it returns an error wrapping ErrNoCheckpoint; when all
// are damaged, one wrapping ErrCorrupt.
func LoadNewestValid(dir string) (path string, f *File, skipped []error, err error) {
	ents, err := List(dir)
	if err != nil {
		return "", nil, nil, err
	}
	if len(ents) == 0 {
		return "", nil, nil, fmt.Errorf("load checkpoint from %q: %w", dir, ErrNoCheckpoint)
	}
	for _, e := range ents {
		f, err := Load(e.Path)
		if err == nil {
			return e.Path, f, skipped, nil
		}
		if !errors.Is(err, ErrCorrupt) {
			return "", nil, skipped, err
		}
		skipped = append(skipped, err)
	}
	return "", nil, skipped, &formatError{kind: ErrCorrupt,
		msg: fmt.Sprintf("load checkpoint from %q: all %d checkpoints are damaged", dir, len(ents))}
}

// Prune removes the older periodic checkpoints of dir, keeping the newest
// keepLast (at least 1, so the newest is never removed), the best copy
// (which is not a periodic checkpoint and never touched) and every path in
// protect (typically the file just written). It returns the removed paths;
// a failed removal is reported after trying the others.
func Prune(dir string, keepLast int, protect ...string) (removed []string, err error) {
	ents, err := List(dir)
	if err != nil {
		return nil, err
	}
	keepLast = max(keepLast, 1)
	keep := make(map[string]bool, len(protect))
	for _, p := range protect {
		keep[filepath.Clean(p)] = true
	}
	var first error
	for i, e := range ents {
		if i < keepLast || keep[filepath.Clean(e.Path)] {
			continue
		}
		if err := os.Remove(e.Path); err != nil {
			if first == nil {
				first = fmt.Errorf("prune checkpoints in %q: %w", dir, err)
			}
			continue
		}
		removed = append(removed, e.Path)
	}
	return removed, first
}
