package report

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"time"

	"weft/checkpoint/runs"
	"weft/data"
	"weft/data/atomicfile"
)

// StatusFile is the name, inside the run's report folder, of the file
// Watch keeps: whether the run is live, how it ended, and the warnings of
// the session.
const StatusFile = "status.json"

// States of a run.
const (
	StateLive  = "live"
	StateEnded = "ended"
)

var statusHeader = data.FileHeader{Format: "weft-report-status", Version: 1}

// Status is what report/status.json holds.
type Status struct {
	data.FileHeader
	State   string    `json:"state"`
	Ended   string    `json:"ended,omitempty"`
	Updated time.Time `json:"updated"`
	Events  []Event   `json:"events"`
}

// Event is a notice of the training session, with the step it came at.
type Event struct {
	Step    int64  `json:"step"`
	Warning bool   `json:"warning"`
	Text    string `json:"text"`
	// Recovery says it was a divergence recovery.
	Recovery bool `json:"recovery,omitempty"`
}

// ReadStatus reads the status file of the run directory dir; nil when
// there is none.
func ReadStatus(dir string) (*Status, error) {
	path := filepath.Join(runs.Layout(dir).Report(), StatusFile)
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("report status: %w", err)
	}
	var st Status
	if err := json.Unmarshal(b, &st); err != nil {
		return nil, fmt.Errorf("report status %s: %w", path, err)
	}
	if err := st.Check(path, statusHeader, false); err != nil {
		return nil, err
	}
	return &st, nil
}

// Watcher is a runs.Observer that keeps the run's page up to date during
// training: it passes every call on to the next observer, notes the
// session's notices, and rewrites report/status.json and report/index.html
// after every validation (at the step's progress call, once the metrics
// line of the validation is written). Finish marks the run ended.
type Watcher struct {
	next    runs.Observer
	dir     string
	now     func() time.Time
	warn    func(string)
	st      Status
	step    int64
	pending bool
	failed  bool
	started bool
}

// Watch returns a Watcher of the run directory dir that passes every call
// on to next (nil for none). now is the clock (nil: time.Now); warn, when
// not nil, hears the first failure to write the page (training goes on).
func Watch(dir string, next runs.Observer, now func() time.Time, warn func(string)) *Watcher {
	if now == nil {
		now = time.Now
	}
	w := &Watcher{next: next, dir: dir, now: now, warn: warn}
	w.st = Status{FileHeader: statusHeader, State: StateLive, Events: []Event{}}
	if old, err := ReadStatus(dir); err == nil && old != nil {
		w.st.Events = old.Events // a resumed run keeps its earlier warnings
	}
	return w
}

func (w *Watcher) Started(s runs.Start) {
	if w.next != nil {
		w.next.Started(s)
	}
	w.step, w.started = s.Step, true
	w.st.State, w.st.Ended = StateLive, ""
	if s.ResumedFrom == "" && s.Step == 0 {
		w.st.Events = []Event{} // a fresh start (or --restart): the old warnings are not this run's
	}
	w.write()
}

func (w *Watcher) Progress(s runs.Status) {
	if w.next != nil {
		w.next.Progress(s)
	}
	w.step = s.Step
	if w.pending {
		w.pending = false
		w.write()
	}
}

func (w *Watcher) Validated(v runs.Validation) {
	if w.next != nil {
		w.next.Validated(v)
	}
	w.step = v.Step
	w.pending = true
}

func (w *Watcher) Notice(n runs.Notice) {
	if w.next != nil {
		w.next.Notice(n)
	}
	if !n.Warning {
		return
	}
	w.st.Events = append(w.st.Events, Event{Step: w.step, Warning: true, Text: n.Text,
		Recovery: strings.HasPrefix(n.Text, "divergence guard")})
}

// Finish marks the run ended, with res and err as runs.Train returned
// them (and signal, the name of the signal that stopped it, if any), and
// writes the page a last time. A session that never started (the run
// directory held by another process, a bad corpus) leaves the page alone.
func (w *Watcher) Finish(res *runs.Result, err error, signal string) {
	if !w.started {
		return
	}
	w.st.State, w.st.Ended = StateEnded, EndedText(res, err, signal)
	w.write()
}

// EndedText says how a training invocation ended.
func EndedText(res *runs.Result, err error, signal string) string {
	switch {
	case err != nil:
		return "stopped by an error: " + err.Error()
	case res == nil:
		return "ended"
	case res.Interrupted && signal != "":
		return fmt.Sprintf("stopped by %s at step %d; the state is saved and the run can be resumed", signal, res.Steps)
	case res.Interrupted:
		return fmt.Sprintf("interrupted at step %d; the state is saved and the run can be resumed", res.Steps)
	case res.NothingToDo:
		return fmt.Sprintf("already finished: %s", res.Reason)
	}
	return fmt.Sprintf("%s at step %d", res.Reason, res.Steps)
}

func (w *Watcher) write() {
	w.st.Updated = w.now().UTC()
	rep := runs.Layout(w.dir).Report()
	err := os.MkdirAll(rep, 0o755)
	if err == nil {
		err = atomicfile.WriteJSON(filepath.Join(rep, StatusFile), w.st, "  ")
	}
	if err == nil {
		var d *Data
		if d, err = Gather(w.dir); err == nil {
			d.Updated = w.st.Updated
			when := "once the run has ended, by"
			if d.State == StateEnded {
				when = "by"
			}
			d.Missing[SectionSurprisal] = "the surprisal view is drawn " + when + " weft report --run " + w.dir
			d.Missing[SectionSamples] = "samples are drawn " + when + " weft report --run " + w.dir
			err = write(w.dir, d, d.State != StateLive)
		}
	}
	if err != nil && !w.failed {
		w.failed = true
		if w.warn != nil {
			w.warn("report not updated: " + err.Error())
		}
	}
}
