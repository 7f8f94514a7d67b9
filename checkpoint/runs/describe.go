package runs

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"time"

	"weft/checkpoint"
)

// StatePrepared is the state of a run directory prepared but never
// trained; StateStale of one whose outcome says training while the process
// that held it is gone (killed, or its machine went down): run it again to
// resume.
const (
	StatePrepared = "prepared"
	StateStale    = "stale"
)

// Summary is what Describe tells of a run directory.
type Summary struct {
	Dir   string `json:"dir"`
	State string `json:"state"`
	// Reason says why it ended (the budget, the error), when it did.
	Reason string `json:"reason,omitempty"`
	// Host and PID are the process of the newest invocation, when known.
	Host string `json:"host,omitempty"`
	PID  int    `json:"pid,omitempty"`
	// Step is the newest step the metrics log records; BestBitsPerChar the
	// best validation bits per character (NaN, written null, when none),
	// at BestStep.
	Step            int64     `json:"step"`
	BestBitsPerChar Number    `json:"best_val_bits_per_char"`
	BestStep        int64     `json:"best_step"`
	LastChange      time.Time `json:"last_change"`
}

// Describe tells the state of the run directory dir from its files, without
// taking its lock: the outcome of its newest invocation (a training
// outcome whose holder is gone, see holderAlive, is StateStale), the step and
// best validation from its metrics log, and its last change. A directory
// without a run file is not a run directory (an error wrapping
// os.ErrNotExist).
func Describe(dir string) (Summary, error) {
	l := Layout(dir)
	s := Summary{Dir: dir, BestBitsPerChar: Number(math.NaN())}
	if !IsRunDir(dir) {
		return s, fmt.Errorf("%s is not a run directory (no %s and %s): %w", dir, RunFile, SplitFile, os.ErrNotExist)
	}
	fi, err := os.Stat(l.RunFile())
	if err != nil {
		return s, err
	}
	s.LastChange = fi.ModTime()
	for _, p := range []string{l.Metrics(), l.File(OutcomeFile), l.Checkpoints()} {
		if fi, err := os.Stat(p); err == nil && fi.ModTime().After(s.LastChange) {
			s.LastChange = fi.ModTime()
		}
	}
	if lines, err := ReadMetrics(l.Metrics()); err == nil {
		for _, m := range lines {
			s.Step = max(s.Step, m.Step)
		}
		s.BestBitsPerChar, s.BestStep = BestValidation(lines)
	}
	o, err := ReadOutcome(dir)
	switch {
	case err == nil:
		s.State, s.Reason, s.Host, s.PID = o.State, o.Reason, o.Host, o.PID
		s.Step = max(s.Step, o.Step)
		if o.State == StateTraining && !holderAlive(dir, o) {
			s.State = StateStale
		}
	case errors.Is(err, os.ErrNotExist):
		// Trained before outcomes were recorded, or only prepared.
		s.State = StatePrepared
		if ents, err := checkpoint.List(l.Checkpoints()); err == nil && len(ents) > 0 {
			s.State = StateInterrupted
			if f, err := checkpoint.Load(ents[0].Path); err == nil {
				if p, err := checkpoint.ReadProgress(f); err == nil && p.Finished {
					s.State, s.Reason = StateFinished, p.FinishReason
				}
			}
		}
	default:
		return s, err
	}
	return s, nil
}

// holderAlive reports whether the process an outcome names still holds the
// run: the lock file names it and it looks alive (Holder.Alive: its
// process on this host, a recent heartbeat on another).
func holderAlive(dir string, o Outcome) bool {
	h, err := ReadHolder(dir)
	return err == nil && h != nil && h.Host == o.Host && h.PID == o.PID && h.Alive(time.Now())
}

// IsRunDir reports whether dir is a run directory: it holds the resolved
// run file and the split report that preparing the run wrote (a folder that
// merely holds a run file named run.toml is not one).
func IsRunDir(dir string) bool {
	for _, p := range []string{Layout(dir).RunFile(), Layout(dir).SplitFile()} {
		if _, err := os.Stat(p); err != nil {
			return false
		}
	}
	return true
}

// Find lists the run directories at or below root (see IsRunDir), at most
// depth levels down, without descending into a run
// directory, sorted by path.
func Find(root string, depth int) ([]string, error) {
	var out []string
	var walk func(dir string, level int) error
	walk = func(dir string, level int) error {
		if IsRunDir(dir) {
			out = append(out, dir)
			return nil
		}
		if level == depth {
			return nil
		}
		ents, err := os.ReadDir(dir)
		if err != nil {
			return err
		}
		for _, e := range ents {
			if e.IsDir() {
				if err := walk(filepath.Join(dir, e.Name()), level+1); err != nil {
					return err
				}
			}
		}
		return nil
	}
	if err := walk(root, 0); err != nil {
		return nil, err
	}
	sort.Strings(out)
	return out, nil
}
