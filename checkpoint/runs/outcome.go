package runs

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"time"

	"weft/data"
)

// OutcomeFile records how the newest training invocation of a run ended
// (or that it is under way), for 'weft runs' and for schedulers.
const OutcomeFile = "outcome.json"

// The states an Outcome records.
const (
	StateTraining    = "training"    // an invocation is (or was, if its process died) training
	StateFinished    = "finished"    // a budget or early stopping ended the run
	StateInterrupted = "interrupted" // a cancellation stopped it after saving; run it again to go on
	StateFailed      = "failed"      // it stopped with an error
)

var outcomeHeader = data.FileHeader{Format: "weft-outcome", Version: 1}

// Outcome is how a training invocation ended, or that it is running.
type Outcome struct {
	data.FileHeader
	State  string    `json:"state"`
	Reason string    `json:"reason,omitempty"` // the budget, "interrupted", or the error
	Step   int64     `json:"step"`
	Time   time.Time `json:"time"` // when it started (training) or ended
	Host   string    `json:"host"`
	PID    int       `json:"pid"`
}

// writeOutcome records o in the run directory; a failure to record it is
// not the run's failure, so it only returns the error for the caller to
// report.
func (d *Dir) writeOutcome(o Outcome) error {
	o.FileHeader = outcomeHeader
	o.Host, o.PID = d.lock.Held.Host, d.lock.Held.PID
	return writeJSON(d.File(OutcomeFile), o)
}

// ReadOutcome reads a run directory's outcome file; a run trained before
// the file existed has none (an error wrapping os.ErrNotExist).
func ReadOutcome(dir string) (Outcome, error) {
	path := Layout(dir).File(OutcomeFile)
	var o Outcome
	b, err := os.ReadFile(path)
	if err != nil {
		return o, fmt.Errorf("outcome: %w", err)
	}
	if err := json.Unmarshal(b, &o); err != nil {
		return o, fmt.Errorf("outcome %s: %w", path, err)
	}
	return o, o.Check(path, outcomeHeader, false)
}

// errOutcome is how an error reads in an outcome.
func errOutcome(err error) string {
	if errors.Is(err, ErrLocked) {
		return ""
	}
	return oneLine(err.Error())
}
