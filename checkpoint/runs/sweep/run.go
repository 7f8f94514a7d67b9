package sweep

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/data/atomicfile"
	"weft/eval"
)

var recordHeader = data.FileHeader{Format: "weft-sweep-outcome", Version: 1}

// The states of a run (Record.State, RunStatus.State).
const (
	StateDone    = "done"    // trained to its budget and evaluated
	StateFailed  = "failed"  // its last attempt ended in an error (Record.Message)
	StateRunning = "running" // a live process holds its run directory
	StateStale   = "stale"   // its lock names a holder that looks dead
	StatePartial = "partial" // checkpoints, not finished, nobody on it: run it again to resume
	StatePending = "pending" // not started
)

// Record is how a run's last attempt ended, kept in the sweep directory's
// outcomes folder (run-NNNN.json).
type Record struct {
	data.FileHeader
	Index   int         `json:"index"`
	State   string      `json:"state"` // StateDone or StateFailed
	Message string      `json:"message,omitempty"`
	Host    string      `json:"host"`
	Time    time.Time   `json:"time"`
	Steps   int64       `json:"steps"`
	BestBPC runs.Number `json:"best_validation_bits_per_char"`
	Reason  string      `json:"reason,omitempty"`
	// RunFile is the SHA-256 of the resolved run file the run finished
	// with (training.threads left out): a done run whose run file has
	// changed since (a budget raised in the base file) is run again, and
	// resumes.
	RunFile string `json:"run_file_sha256,omitempty"`
}

// runFileDigest is Record.RunFile for r.
func runFileDigest(r *configs.Run) string {
	c := *r
	c.Training.Threads = 0
	b, err := configs.Encode(&c)
	if err != nil {
		return ""
	}
	h := sha256.Sum256(b)
	return hex.EncodeToString(h[:])
}

func (sw *Sweep) recordPath(e Entry) string {
	return filepath.Join(sw.Dir, OutcomesDir, e.Name()+".json")
}

// ReadRecord reads the outcome of e; nil, with no error, when it has none.
func (sw *Sweep) ReadRecord(e Entry) (*Record, error) {
	path := sw.recordPath(e)
	b, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("sweep outcome: %w", err)
	}
	var r Record
	if err := json.Unmarshal(b, &r); err != nil {
		return nil, fmt.Errorf("sweep outcome %s: %w", path, err)
	}
	return &r, r.Check(path, recordHeader, false)
}

func (sw *Sweep) writeRecord(e Entry, r Record) error {
	if err := os.MkdirAll(filepath.Join(sw.Dir, OutcomesDir), 0o755); err != nil {
		return fmt.Errorf("sweep directory %s: %w", sw.Dir, err)
	}
	r.FileHeader, r.Index = recordHeader, e.Index
	r.Host, _ = os.Hostname()
	return writeJSON(sw.recordPath(e), r)
}

func writeJSON(path string, v any) error {
	if err := atomicfile.WriteJSON(path, v, "  "); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}

// RunOptions are the settings of one 'sweep run' that are not in the
// sweep file, and its dependencies.
type RunOptions struct {
	// Threads, when positive, overrides training.threads (the local
	// runner splits the machine's cores between its runs).
	Threads int
	// StealStale takes over the run directory's lock when it names a
	// holder on another host whose heartbeat is older than
	// runs.StaleAfter (runs.StealStale).
	StealStale bool
	// Train is passed to runs.Train (observer, clock, save function).
	Train runs.TrainOptions
	// Evaluate, when non-nil, is called once the run has finished
	// training, with its run directory held, its data prepared and the
	// shared baselines fitted, to score and report it. An error fails the
	// run.
	Evaluate func(ctx context.Context, e Entry, r *configs.Run, d *runs.Dir, ds *data.Dataset, ladder *eval.Ladder) error
	// Note hears what the sweep does besides training ("already done",
	// "baselines reused from ..."); nil hears nothing.
	Note func(string)
}

// Outcome is what one 'sweep run' of an index did.
type Outcome struct {
	Entry Entry
	// AlreadyDone says the run had finished before: nothing was done.
	AlreadyDone bool
	// Result is the training invocation's result; nil when AlreadyDone.
	Result *runs.Result
	// TookOver is the holder whose stale lock was taken over, if any.
	TookOver *runs.Holder
}

// Run trains run index of the plan p in its own run directory under the
// sweep directory (runs.Train: a fresh start, or a resume of a partial
// run), then fits or reuses the baselines shared by the runs of equal data
// settings, evaluates it through o.Evaluate and records it as done. A run
// recorded as done with the same run file returns at once with
// AlreadyDone; one whose run file has changed since (a budget raised in the
// base file) is trained on, and runs.Train refuses the changes a resume
// cannot take, naming the keys. A cancelled ctx
// stops training after a save: the outcome's Result says Interrupted and
// nothing is recorded. A run directory held by a live process is an error
// wrapping runs.ErrLocked. Any other error is recorded as the run's
// failure and returned.
func (sw *Sweep) Run(ctx context.Context, p *Plan, index int, o RunOptions) (*Outcome, error) {
	e, err := p.Entry(index)
	if err != nil {
		return nil, err
	}
	note := o.Note
	if note == nil {
		note = func(string) {}
	}
	out := &Outcome{Entry: e}
	var more []string
	if o.Threads > 0 {
		more = append(more, fmt.Sprintf("training.threads=%d", o.Threads))
	}
	r, err := sw.Resolve(e, more...)
	if err != nil {
		return nil, err
	}
	if rec, err := sw.ReadRecord(e); err != nil {
		return nil, err
	} else if rec != nil && rec.State == StateDone && rec.RunFile == runFileDigest(r) {
		out.AlreadyDone = true
		return out, nil
	}
	dir := sw.RunDir(e)
	if o.StealStale {
		h, err := runs.StealStale(dir, time.Now())
		if err != nil {
			return nil, err
		}
		if h != nil {
			out.TookOver = h
			note(fmt.Sprintf("took over the stale lock of %s, held by %s", dir, h))
		}
	}
	res, err := runs.Train(ctx, r, dir, o.Train)
	var le *runs.LockedError
	if errors.As(err, &le) && le.Note != "" && !strings.Contains(err.Error(), le.Note) {
		// Keep the lock's advice (how to clear a lock from another host).
		err = fmt.Errorf("%w; %s", err, le.Note)
	}
	if err != nil {
		return nil, sw.failed(e, err)
	}
	out.Result = res
	if res.Interrupted {
		return out, nil
	}
	if err := sw.finish(ctx, e, r, dir, res, o, note); err != nil {
		return nil, sw.failed(e, err)
	}
	return out, nil
}

// failed records err as e's outcome unless another process holds the run
// (its outcome is that process's to write), and returns err.
func (sw *Sweep) failed(e Entry, err error) error {
	if errors.Is(err, runs.ErrLocked) || errors.Is(err, context.Canceled) {
		return err
	}
	if werr := sw.writeRecord(e, Record{State: StateFailed, Message: err.Error(), Time: time.Now().UTC().Truncate(time.Second), BestBPC: runs.Number(math.NaN())}); werr != nil {
		return errors.Join(err, werr)
	}
	return err
}

// finish fits or reuses the shared baselines, evaluates the run and
// records it as done.
func (sw *Sweep) finish(ctx context.Context, e Entry, r *configs.Run, dir string, res *runs.Result, o RunOptions, note func(string)) error {
	d, err := runs.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	ds, err := runs.Prepare(ctx, r, d, nil)
	if err != nil {
		return err
	}
	defer ds.Close()
	ladder, err := sw.SharedBaselines(ctx, r, ds, note)
	if err != nil {
		return err
	}
	if o.Evaluate != nil {
		if err := o.Evaluate(ctx, e, r, d, ds, ladder); err != nil {
			return err
		}
	}
	return sw.writeRecord(e, Record{State: StateDone, Time: time.Now().UTC().Truncate(time.Second),
		Steps: res.Steps, BestBPC: runs.Number(res.BestValBitsPerChar), Reason: res.Reason, RunFile: runFileDigest(r)})
}

// BaselinesKey names the shared baselines folder of a run: a digest of
// its [data] and [evaluation] sections, so that runs preparing the same
// corpus the same way and fitting the same ladder share one.
func BaselinesKey(r *configs.Run) string {
	b, err := json.Marshal(struct {
		Data data.Config
		Eval eval.Config
	}{r.Data, r.Evaluation.Config})
	if err != nil {
		panic("sweep: " + err.Error())
	}
	h := sha256.Sum256(b)
	return hex.EncodeToString(h[:6])
}

// SharedBaselines fits the baseline ladder of r on ds's training split
// into the sweep's shared folder for r's data and evaluation settings, or
// loads it from there when another run fitted it: under the folder's lock,
// so that concurrent runs fit it once (runs.FitBaselines checks what the
// cache was fitted on).
func (sw *Sweep) SharedBaselines(ctx context.Context, r *configs.Run, ds *data.Dataset, note func(string)) (*eval.Ladder, error) {
	dir := filepath.Join(sw.Dir, BaselinesDir, BaselinesKey(r))
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("shared baselines %s: %w", dir, err)
	}
	l, err := lockWait(ctx, dir)
	if err != nil {
		return nil, err
	}
	defer l.Unlock()
	return runs.FitBaselines(ctx, r.Evaluation.Config, ds, dir, nil, note)
}
