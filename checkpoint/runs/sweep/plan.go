package sweep

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
)

// The names inside a sweep directory.
const (
	PlanFile     = "plan.json" // the recorded plan (Plan)
	OutcomesDir  = "outcomes"  // run-NNNN.json: how each run last ended (Record)
	BaselinesDir = "baselines" // KEY/: a baseline ladder shared by the runs of equal data settings
	LockFile     = runs.LockFile
)

// ErrPlanChanged is wrapped by the error of a sweep file that no longer
// gives runs that have started.
var ErrPlanChanged = errors.New("sweep plan changed under started runs")

// ErrNotInPlan is wrapped by the error for an index the plan does not have.
var ErrNotInPlan = errors.New("index not in the sweep plan")

var planHeader = data.FileHeader{Format: "weft-sweep-plan", Version: 1}

// Plan is the numbered list of a sweep's runs, as recorded in the sweep
// directory's plan.json.
type Plan struct {
	data.FileHeader
	// Sweep is the sweep file the plan was last made from.
	Sweep string  `json:"sweep"`
	Runs  []Entry `json:"runs"` // by index
}

// Entry is one run of a plan: its index and the keys it sets on the base
// run file.
type Entry struct {
	Index    int       `json:"index"`
	Settings []Setting `json:"settings"`
}

// Name is the run's directory name inside the sweep directory: run-0007.
func (e Entry) Name() string { return fmt.Sprintf("run-%04d", e.Index) }

// Label lists the run's settings, "key=value key=value", or "(base)".
func (e Entry) Label() string {
	if len(e.Settings) == 0 {
		return "(base)"
	}
	parts := make([]string, len(e.Settings))
	for i, s := range e.Settings {
		parts[i] = s.String()
	}
	return strings.Join(parts, " ")
}

// Entry returns the run of the plan with this index.
func (p *Plan) Entry(index int) (Entry, error) {
	for _, e := range p.Runs {
		if e.Index == index {
			return e, nil
		}
	}
	return Entry{}, fmt.Errorf("run %d: %w (it has %s)", index, ErrNotInPlan, p.Indices())
}

// Indices gives the plan's indices as ranges, "0-5,7": the form of a job
// array's index list.
func (p *Plan) Indices() string {
	var parts []string
	for i := 0; i < len(p.Runs); {
		j := i
		for j+1 < len(p.Runs) && p.Runs[j+1].Index == p.Runs[j].Index+1 {
			j++
		}
		if j == i {
			parts = append(parts, fmt.Sprint(p.Runs[i].Index))
		} else {
			parts = append(parts, fmt.Sprintf("%d-%d", p.Runs[i].Index, p.Runs[j].Index))
		}
		i = j + 1
	}
	if len(parts) == 0 {
		return "none"
	}
	return strings.Join(parts, ",")
}

// Expand lists the runs of the sweep file in its canonical order: the
// grid first, the axes crossed with the first varying slowest and the last
// fastest, then the explicit runs in file order. Two runs with the same
// settings are an error.
func (sw *Sweep) Expand() ([][]Setting, error) {
	var out [][]Setting
	if len(sw.Axes) > 0 {
		idx := make([]int, len(sw.Axes))
		for {
			var run []Setting
			for a, ax := range sw.Axes {
				for k, key := range ax.Keys {
					run = append(run, Setting{key, ax.Values[k][idx[a]]})
				}
			}
			out = append(out, run)
			a := len(sw.Axes) - 1
			for ; a >= 0; a-- {
				idx[a]++
				if idx[a] < sw.Axes[a].Len() {
					break
				}
				idx[a] = 0
			}
			if a < 0 {
				break
			}
		}
	}
	out = append(out, sw.Extra...)
	seen := map[string]int{}
	for i, run := range out {
		id := settingsID(run)
		if j, ok := seen[id]; ok {
			return nil, &Error{File: sw.Path, Msg: fmt.Sprintf("runs %d and %d of the expansion are the same run (%s)", j, i, Entry{Settings: run}.Label())}
		}
		seen[id] = i
	}
	return out, nil
}

// Resolve gives the run file of e: the base run file with e's settings
// applied as overrides, and more after them (e.g. "training.threads=2").
func (sw *Sweep) Resolve(e Entry, more ...string) (*configs.Run, error) {
	sets := make([]string, 0, len(e.Settings)+len(more))
	for _, s := range e.Settings {
		sets = append(sets, s.String())
	}
	r, err := configs.Load(sw.Base, append(sets, more...))
	if err != nil {
		return nil, fmt.Errorf("sweep %s, run %d (%s): %w", sw.Path, e.Index, e.Label(), err)
	}
	return r, nil
}

// RunDir is the run directory of e.
func (sw *Sweep) RunDir(e Entry) string { return filepath.Join(sw.Dir, e.Name()) }

// ReadPlan reads the plan recorded in the sweep directory dir; nil, with
// no error, when none is recorded yet.
func ReadPlan(dir string) (*Plan, error) {
	path := filepath.Join(dir, PlanFile)
	b, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("sweep plan: %w", err)
	}
	var p Plan
	if err := json.Unmarshal(b, &p); err != nil {
		return nil, fmt.Errorf("sweep plan %s: %w", path, err)
	}
	if err := p.Check(path, planHeader, false); err != nil {
		return nil, err
	}
	return &p, nil
}

// Plan numbers the sweep's runs and checks that each resolves to a valid
// run file. With record, the plan is reconciled with the one recorded in
// the sweep directory, under the sweep directory's lock, and saved there;
// without, the recorded plan is read and reconciled but nothing is
// written (a sweep directory not created yet gets the canonical
// numbering).
//
// Numbering: the first plan numbers the runs 0, 1, 2, ... in the canonical
// order of Expand. A later plan keeps the index of every run already
// recorded (a run is its set of settings, whatever their order); runs new
// to the sweep file take the indices of recorded runs that the sweep file
// no longer gives and that never started, lowest first, then the indices
// after the highest. So appending a value to an axis, or adding an
// explicit run, never moves an existing run: the new runs get new indices.
// A recorded run that the sweep file no longer gives (a value changed or
// removed) and that has started (it has a checkpoint or an outcome) makes
// Plan fail with ErrPlanChanged, naming those indices.
func (sw *Sweep) Plan(ctx context.Context, record bool) (*Plan, error) {
	exp, err := sw.Expand()
	if err != nil {
		return nil, err
	}
	for i, run := range exp {
		if _, err := sw.Resolve(Entry{Index: i, Settings: run}); err != nil {
			return nil, err
		}
	}
	if !record {
		old, err := ReadPlan(sw.Dir)
		if err != nil {
			return nil, err
		}
		return sw.reconcile(old, exp)
	}
	if err := os.MkdirAll(sw.Dir, 0o755); err != nil {
		return nil, fmt.Errorf("sweep directory %s: %w", sw.Dir, err)
	}
	l, err := lockWait(ctx, sw.Dir)
	if err != nil {
		return nil, err
	}
	defer l.Unlock()
	old, err := ReadPlan(sw.Dir)
	if err != nil {
		return nil, err
	}
	p, err := sw.reconcile(old, exp)
	if err != nil {
		return nil, err
	}
	if old == nil || !samePlan(old, p) {
		if err := writeJSON(filepath.Join(sw.Dir, PlanFile), p); err != nil {
			return nil, err
		}
	}
	return p, nil
}

func samePlan(a, b *Plan) bool {
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	return string(ja) == string(jb)
}

func (sw *Sweep) reconcile(old *Plan, exp [][]Setting) (*Plan, error) {
	abs, err := filepath.Abs(sw.Path)
	if err != nil {
		abs = sw.Path
	}
	p := &Plan{FileHeader: planHeader, Sweep: abs}
	recorded := map[string]Entry{}
	if old != nil {
		for _, e := range old.Runs {
			recorded[settingsID(e.Settings)] = e
		}
	}
	var fresh [][]Setting
	for _, run := range exp {
		id := settingsID(run)
		if e, ok := recorded[id]; ok {
			p.Runs = append(p.Runs, Entry{Index: e.Index, Settings: run})
			delete(recorded, id)
			continue
		}
		fresh = append(fresh, run)
	}
	var free, changed []int
	var changedLabels []string
	next := 0
	if old != nil {
		for _, e := range old.Runs {
			next = max(next, e.Index+1)
		}
	}
	for _, e := range recorded {
		if sw.started(e) {
			changed = append(changed, e.Index)
		} else {
			free = append(free, e.Index)
		}
	}
	if len(changed) > 0 {
		sort.Ints(changed)
		for _, i := range changed {
			for _, e := range old.Runs {
				if e.Index == i {
					changedLabels = append(changedLabels, fmt.Sprintf("%d (%s)", i, e.Label()))
				}
			}
		}
		return nil, fmt.Errorf("sweep %s: %w: the sweep file no longer gives run %s, which started in %s; restore those values, or give the sweep a new directory",
			sw.Path, ErrPlanChanged, strings.Join(changedLabels, ", "), sw.Dir)
	}
	sort.Ints(free)
	for _, run := range fresh {
		idx := next
		if len(free) > 0 {
			idx, free = free[0], free[1:]
		} else {
			next++
		}
		p.Runs = append(p.Runs, Entry{Index: idx, Settings: run})
	}
	sort.Slice(p.Runs, func(i, j int) bool { return p.Runs[i].Index < p.Runs[j].Index })
	return p, nil
}

// started says whether a run has anything to lose: a checkpoint or an
// outcome.
func (sw *Sweep) started(e Entry) bool {
	if _, err := os.Stat(sw.recordPath(e)); err == nil {
		return true
	}
	ents, err := checkpoint.List(runs.Layout(sw.RunDir(e)).Checkpoints())
	return err == nil && len(ents) > 0
}

// lockWait takes the lock of dir (a sweep directory or a shared baselines
// folder, held briefly), waiting while another process holds it. A lock
// left by a dead holder on another host is taken over once its heartbeat
// is older than runs.StaleAfter.
func lockWait(ctx context.Context, dir string) (*runs.DirLock, error) {
	for {
		l, err := runs.Lock(dir)
		if err == nil {
			return l, nil
		}
		if !errors.Is(err, runs.ErrLocked) {
			return nil, err
		}
		if h, serr := runs.StealStale(dir, time.Now()); serr == nil && h != nil {
			continue
		}
		select {
		case <-ctx.Done():
			return nil, fmt.Errorf("waiting for %s: %w", dir, ctx.Err())
		case <-time.After(50 * time.Millisecond):
		}
	}
}
