package sweep

import (
	"math"
	"os"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/runs"
)

// RunStatus is where one run of a sweep stands, as read from its files;
// reading it takes no lock and changes nothing.
type RunStatus struct {
	Index    int    `json:"index"`
	Name     string `json:"name"`
	Settings string `json:"settings"`
	State    string `json:"state"`
	// Step is the newest step the metrics log records (the final step for
	// a done run).
	Step int64 `json:"step"`
	// BestBPC is the best validation bits per character so far; NaN
	// (null) before the first validation.
	BestBPC runs.Number `json:"best_validation_bits_per_char"`
	// TokensPerSec is the training speed over the run's whole training
	// time (all invocations), from the metrics log.
	TokensPerSec runs.Number `json:"tokens_per_second"`
	// Host and Heartbeat are from the lock while the run is held (or was,
	// when stale), else from the last outcome.
	Host      string    `json:"host,omitempty"`
	Heartbeat time.Time `json:"last_heartbeat,omitzero"`
	// Message is the error of a failed run.
	Message string `json:"message,omitempty"`
}

// Status reads the state of every run of the plan p at now.
func (sw *Sweep) Status(p *Plan, now time.Time) ([]RunStatus, error) {
	out := make([]RunStatus, 0, len(p.Runs))
	for _, e := range p.Runs {
		st := RunStatus{Index: e.Index, Name: e.Name(), Settings: e.Label(), State: StatePending,
			BestBPC: runs.Number(math.NaN()), TokensPerSec: runs.Number(math.NaN())}
		dir := sw.RunDir(e)
		lay := runs.Layout(dir)
		if lines, err := runs.ReadMetrics(lay.Metrics()); err == nil && len(lines) > 0 {
			last := lines[len(lines)-1]
			st.Step = last.Step
			if last.WallSeconds > 0 {
				st.TokensPerSec = runs.Number(float64(last.Tokens) / last.WallSeconds)
			}
			st.BestBPC, _ = runs.BestValidation(lines)
		}
		if ents, err := checkpoint.List(lay.Checkpoints()); err == nil && len(ents) > 0 {
			st.State = StatePartial
			st.Step = max(st.Step, ents[0].Step)
		}
		rec, err := sw.ReadRecord(e)
		if err != nil {
			return nil, err
		}
		if rec != nil {
			st.State, st.Message, st.Host, st.Heartbeat = rec.State, rec.Message, rec.Host, rec.Time
			if rec.State == StateDone {
				st.Step = rec.Steps
				if !math.IsNaN(float64(rec.BestBPC)) {
					st.BestBPC = rec.BestBPC
				}
			}
		}
		h, err := runs.ReadHolder(dir)
		if err != nil {
			return nil, err
		}
		if h != nil {
			st.Host, st.Heartbeat = h.Host, h.LastSeen()
			if h.Alive(now) {
				st.State = StateRunning
			} else if rec == nil || rec.State != StateDone {
				st.State = StateStale
			}
		} else if _, err := os.Stat(lay.Lock()); err == nil && (rec == nil || rec.State != StateDone) {
			st.State = StateRunning // the lock file is being written
		}
		out = append(out, st)
	}
	return out, nil
}
