package sweep

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"sync"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/eval"
)

// Evaluate scores a finished run's best checkpoint and the shared
// baselines on the test split and saves the comparison in the run's report
// folder, as 'weft eval' does: the RunOptions.Evaluate of 'weft sweep run'.
func Evaluate(ctx context.Context, e Entry, r *configs.Run, d *runs.Dir, ds *data.Dataset, ladder *eval.Ladder) error {
	m, err := runs.OpenModel(d.Path(), "best")
	if err != nil {
		return err
	}
	models := append([]eval.Entrant{{Model: m.Net, Label: runs.ModelLabel(m), Kind: "rnn"}}, runs.BaselineEntrants(ladder)...)
	cmp, err := runs.CompareDataset(ctx, r.Evaluation.Config, ds, data.SplitTest, models, nil, nil)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(d.Report(), 0o755); err != nil {
		return fmt.Errorf("report folder: %w", err)
	}
	return d.WriteJSON(filepath.Join(runs.ReportDir, "eval-test.json"), cmp)
}

// Comparison is one table of Compare: the finished runs that share data
// and evaluation settings, compared with their shared baselines.
type Comparison struct {
	Baselines string           `json:"baselines"` // the shared baselines folder
	Runs      []int            `json:"runs"`
	Table     *eval.Comparison `json:"comparison"`
}

// Compare scores the best checkpoint of every finished run of the plan and
// the shared baselines on the same held-out split (data.SplitTest or
// data.SplitValidation), one table per baselines key, in the plan's order.
// Runs are not interpolated with a baseline: each row is one model. It is
// an error when no run has finished.
func (sw *Sweep) Compare(ctx context.Context, p *Plan, split string) ([]Comparison, error) {
	type group struct {
		r      *configs.Run
		models []eval.Entrant
		runs   []int
	}
	groups := map[string]*group{}
	var keys []string
	for _, e := range p.Runs {
		rec, err := sw.ReadRecord(e)
		if err != nil {
			return nil, err
		}
		if rec == nil || rec.State != StateDone {
			continue
		}
		r, err := sw.Resolve(e)
		if err != nil {
			return nil, err
		}
		m, err := runs.OpenModel(sw.RunDir(e), "best")
		if err != nil {
			return nil, err
		}
		k := BaselinesKey(r)
		g := groups[k]
		if g == nil {
			g = &group{r: r}
			groups[k] = g
			keys = append(keys, k)
		}
		g.models = append(g.models, eval.Entrant{Model: m.Net, Label: fmt.Sprintf("run %d: %s", e.Index, e.Label()), Kind: "rnn"})
		g.runs = append(g.runs, e.Index)
	}
	if len(keys) == 0 {
		return nil, ErrNoneDone
	}
	var out []Comparison
	for _, k := range keys {
		g := groups[k]
		ds, err := runs.Prepare(ctx, g.r, nil, nil)
		if err != nil {
			return nil, err
		}
		ladder, err := sw.SharedBaselines(ctx, g.r, ds, nil)
		if err != nil {
			return nil, err
		}
		cfg := g.r.Evaluation.Config
		cfg.Interpolate = false // one model per row, none mixed
		cmp, err := runs.CompareDataset(ctx, cfg, ds, split, append(g.models, runs.BaselineEntrants(ladder)...), nil, nil)
		if err != nil {
			return nil, err
		}
		cmp.Bands = nil
		out = append(out, Comparison{Baselines: filepath.Join(sw.Dir, BaselinesDir, k), Runs: g.runs, Table: cmp})
	}
	return out, nil
}

// ErrNoneDone is Compare's error when no run of the plan has finished.
var ErrNoneDone = fmt.Errorf("no run is done yet")

// RunAll runs every index of the plan on this machine, parallel at a time
// (the local runner), each with its share of its training.threads (0: the
// cores) in opts' Threads; done hears each run's outcome as it ends. It
// stops handing out runs once ctx is cancelled (the runs under way save
// and stop).
func (sw *Sweep) RunAll(ctx context.Context, p *Plan, parallel int, opts func(e Entry) RunOptions, done func(e Entry, out *Outcome, err error)) {
	jobs := make(chan Entry)
	var wg sync.WaitGroup
	for range max(parallel, 1) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for e := range jobs {
				o := opts(e)
				threads := 1
				if r, err := sw.Resolve(e); err == nil {
					t := r.Training.Threads
					if t == 0 {
						t = runtime.NumCPU()
					}
					threads = max(1, t/max(parallel, 1))
				}
				o.Threads = threads
				out, err := sw.Run(ctx, p, e.Index, o)
				done(e, out, err)
			}
		}()
	}
	for _, e := range p.Runs {
		if ctx.Err() != nil {
			break
		}
		jobs <- e
	}
	close(jobs)
	wg.Wait()
}
