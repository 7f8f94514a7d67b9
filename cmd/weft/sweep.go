package main

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/checkpoint/runs/sweep"
	"weft/configs"
)

// Exit statuses of 'weft sweep run' beyond the common ones, documented in
// the README for the requeue policies of schedulers: 0 the run is done (now
// or before), 3 interrupted with its state saved (run it again: it
// resumes), 4 another live process holds the run, 5 failed for good (the
// sweep file, the plan or the run itself: running it again gives the same
// error), 1 any other failure (it may pass on a retry), 2 a usage error.
const (
	exitBusy    = 4
	exitForGood = 5
)

// getenv reads the scheduler's index variables; tests replace it.
var getenv = os.Getenv

// The environment variables a scheduler sets to a task's index.
const (
	envSlurmIndex = "SLURM_ARRAY_TASK_ID"
	envKubeIndex  = "JOB_COMPLETION_INDEX"
)

type sweepOptions struct {
	cmdContext
	Sweep      string
	Index      int
	IndexSet   bool
	All        bool
	Parallel   int
	StealStale bool
	Quiet      bool
	JSON       bool
	Split      string
}

// newSweepCmd is 'weft sweep' with its four verbs; runF, when non-nil,
// receives the parsed options of any of them with the verb's name.
func newSweepCmd(d *deps, runF func(verb string, o *sweepOptions) error) *cobra.Command {
	cmd := &cobra.Command{
		Use:   "sweep",
		Short: "Plan, run, watch and compare many runs of one base run file",
		Long: `A sweep file names a base run file and the run-file keys to vary: axes
crossed with one another (the keys of one axis zipped) and explicit runs.
Each run trains in its own run directory under the sweep directory, so any
scheduler can run the indices: a Slurm job array, a Kubernetes indexed job,
or --all --parallel N on one machine.`,
		Example: "  weft sweep plan testdata/sweep/harbour-sweep.toml\n  weft sweep run testdata/sweep/harbour-sweep.toml --all --parallel 2",
		Args:    exactArgs(0, "a verb: plan, run, status or compare"),
		RunE:    func(cmd *cobra.Command, args []string) error { return cmd.Help() },
	}
	verb := func(name, use, short, long string, flags func(*cobra.Command, *sweepOptions), fn func(*sweepOptions) error) *cobra.Command {
		opts := &sweepOptions{}
		c := &cobra.Command{
			Use: use, Short: short, Long: long,
			Example: "  weft sweep " + name + " testdata/sweep/harbour-sweep.toml",
			Args:    exactArgs(1, "one sweep file"),
			RunE: func(c *cobra.Command, args []string) error {
				opts.cmdContext = cmdContext{c.Context(), d}
				opts.Sweep = args[0]
				opts.IndexSet = c.Flags().Changed("index")
				if runF != nil {
					return runF(name, opts)
				}
				return fn(opts)
			},
		}
		if flags != nil {
			flags(c, opts)
		}
		return c
	}
	jsonFlag := func(c *cobra.Command, o *sweepOptions) {
		c.Flags().BoolVar(&o.JSON, "json", false, "print JSON")
	}
	cmd.AddCommand(
		verb("plan", "plan SWEEP", "Number the runs of a sweep file and record the plan",
			`Expand the sweep file into its numbered runs, check each resolves to a valid
run file, record the plan in the sweep directory and print it. Recorded runs
keep their indices when the sweep file grows; a sweep file that no longer
gives a run that has started is refused, naming the indices.`, jsonFlag, runSweepPlan),
		verb("run", "run SWEEP [--index I | --all]", "Train one run of a sweep (a scheduler's task), or all of them",
			`Train run I in its own run directory under the sweep directory, fit or reuse
the baselines shared by the runs with equal data settings, and evaluate it
on the test split. The index comes from --index, else SLURM_ARRAY_TASK_ID,
else JOB_COMPLETION_INDEX.

Running it again is safe: a done run exits 0 at once, a partial one resumes.
SIGINT, SIGTERM and SIGUSR1 save and exit 3.

Exit statuses: 0 done (now or before); 1 failed (a retry may pass);
2 usage; 3 interrupted and saved (run again to resume); 4 the run is held by
another live process; 5 failed for good (the sweep file, the plan or the run
itself).

--all runs every index, --parallel N at a time, with training.threads
divided between them.`, func(c *cobra.Command, o *sweepOptions) {
				f := c.Flags()
				f.IntVar(&o.Index, "index", 0, "the run to train (default: $"+envSlurmIndex+", then $"+envKubeIndex+")")
				f.BoolVar(&o.All, "all", false, "run every index of the plan on this machine")
				f.IntVar(&o.Parallel, "parallel", 1, "with --all: runs at a time")
				f.BoolVar(&o.StealStale, "steal-stale", false, fmt.Sprintf("take over a run whose lock was written on another host with a heartbeat older than %s", runs.StaleAfter))
				f.BoolVar(&o.Quiet, "quiet", false, "print no progress, only warnings and the final line")
			}, runSweepRun),
		verb("status", "status SWEEP", "Show where every run of a sweep stands",
			`One line per run: state (pending, running, partial, stale, done, failed),
step, best validation bits per character, training tokens per second, the
host and its last heartbeat; then a summary line. Reads files only.`, jsonFlag, runSweepStatus),
		verb("compare", "compare SWEEP", "Compare the finished runs of a sweep and their baselines in one table",
			`Score the best checkpoint of every finished run and the shared baselines on
the same held-out split and print one table per data setting, best first,
with block-bootstrap intervals.`, func(c *cobra.Command, o *sweepOptions) {
				jsonFlag(c, o)
				c.Flags().StringVar(&o.Split, "split", "test", "held-out split to report: test or validation")
			}, runSweepCompare),
	)
	return cmd
}

// forGood marks an error that running the same command again would repeat.
func forGood(err error) error { return &exitError{code: exitForGood, err: err} }

func loadSweep(path string) (*sweep.Sweep, error) {
	sw, err := sweep.Load(path)
	if err != nil {
		return nil, forGood(err)
	}
	return sw, nil
}

// planSweep records and returns the plan; errors in the sweep file or
// the plan are for good.
func planSweep(ctx context.Context, sw *sweep.Sweep, record bool) (*sweep.Plan, error) {
	p, err := sw.Plan(ctx, record)
	var ce *configs.Error
	if errors.Is(err, sweep.ErrPlanChanged) || errors.As(err, &ce) {
		return nil, forGood(err)
	}
	return p, err
}

func runSweepPlan(opts *sweepOptions) error {
	sw, err := loadSweep(opts.Sweep)
	if err != nil {
		return err
	}
	p, err := planSweep(opts.ctx, sw, true)
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSONLine(opts.Out, p)
	}
	fmt.Fprintf(opts.Out, "%d runs of %s in %s (indices %s)\n\n", len(p.Runs), sw.Base, sw.Dir, p.Indices())
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "index\tdirectory\tsettings")
	for _, e := range p.Runs {
		fmt.Fprintf(tw, "%d\t%s\t%s\n", e.Index, e.Name(), e.Label())
	}
	return tw.Flush()
}

// sweepIndex is the index a task runs: --index, else the scheduler's.
func sweepIndex(opts *sweepOptions) (int, error) {
	if opts.IndexSet {
		if opts.Index < 0 {
			return 0, usagef("--index must be at least 0, got %d", opts.Index)
		}
		return opts.Index, nil
	}
	for _, name := range []string{envSlurmIndex, envKubeIndex} {
		v := getenv(name)
		if v == "" {
			continue
		}
		i, err := strconv.Atoi(v)
		if err != nil || i < 0 {
			return 0, usagef("%s=%q is not a run index", name, v)
		}
		return i, nil
	}
	return 0, usagef("no run index: give --index I, or run it as a task of a job array ($%s) or an indexed job ($%s); --all runs every index", envSlurmIndex, envKubeIndex)
}

func runSweepRun(opts *sweepOptions) error {
	if opts.All && opts.IndexSet {
		return usagef("give --index or --all, not both")
	}
	if opts.Parallel < 1 {
		return usagef("--parallel must be at least 1, got %d", opts.Parallel)
	}
	if opts.Parallel > 1 && !opts.All {
		return usagef("--parallel goes with --all")
	}
	var index int
	if !opts.All {
		i, err := sweepIndex(opts)
		if err != nil {
			return err
		}
		index = i
	}
	sw, err := loadSweep(opts.Sweep)
	if err != nil {
		return err
	}
	p, err := planSweep(opts.ctx, sw, true)
	if err != nil {
		return err
	}
	if opts.All {
		return runSweepAll(opts, sw, p)
	}
	if _, err := p.Entry(index); err != nil {
		return forGood(err)
	}
	rep := newReporter(opts.deps, 30*time.Second, opts.Quiet)
	defer rep.finish()
	ctx, sig, release := stopOnSignals(opts.cmdContext, rep, sw.Dir)
	defer release()
	out, err := sw.Run(ctx, p, index, sweepRunOptions(opts, rep, &trainObserver{rep: rep}, 0))
	rep.finish()
	return sweepRunEnd(opts, index, out, err, sig)
}

// sweepRunOptions are the options of one index's run.
func sweepRunOptions(opts *sweepOptions, rep *reporter, obs runs.Observer, threads int) sweep.RunOptions {
	return sweep.RunOptions{
		Threads: threads, StealStale: opts.StealStale,
		Train:    runs.TrainOptions{Observer: obs, Now: opts.Now, Save: saveCheckpoint, AfterStep: trainStepHook},
		Evaluate: sweep.Evaluate,
		Note:     func(s string) { rep.logf("%s", s) },
	}
}

// sweepRunEnd prints how a run ended and gives its exit status.
func sweepRunEnd(opts *sweepOptions, index int, out *sweep.Outcome, err error, sig *atomic.Value) error {
	switch {
	case errors.Is(err, runs.ErrLocked):
		return &exitError{code: exitBusy, err: fmt.Errorf("run %d: %w", index, err)}
	case errors.Is(err, context.Canceled):
		// Stopped after training, while fitting baselines or evaluating:
		// the training is saved, and running it again finishes the rest.
		return &exitError{code: exitInterrupted, err: fmt.Errorf("run %d stopped before its evaluation finished; the training is saved: run it again to finish", index)}
	case errors.Is(err, sweep.ErrNotInPlan):
		return forGood(err)
	case errors.Is(err, runs.ErrGaveUp):
		return forGood(fmt.Errorf("run %d: %w", index, err))
	case err != nil:
		var ce *configs.Error
		if errors.As(err, &ce) {
			return forGood(err)
		}
		return fmt.Errorf("run %d: %w", index, err)
	}
	switch {
	case out.AlreadyDone:
		fmt.Fprintf(opts.Out, "run %d (%s) is already done\n", index, out.Entry.Label())
	case out.Result.Interrupted:
		name, _ := sig.Load().(string)
		if name == "" {
			name = "cancellation"
		}
		return &exitError{code: exitInterrupted, err: fmt.Errorf("run %d stopped by %s at step %d; the state is saved: run it again to resume", index, name, out.Result.Steps)}
	default:
		res := out.Result
		fmt.Fprintf(opts.Out, "run %d (%s) done: %s at step %s", index, out.Entry.Label(), res.Reason, thousands(res.Steps))
		if finite(res.BestValBitsPerChar) {
			fmt.Fprintf(opts.Out, ", best validation %.4f bits per character", res.BestValBitsPerChar)
		}
		fmt.Fprintln(opts.Out)
	}
	return nil
}

// runSweepAll is the local runner: every index, opts.Parallel at a time,
// each with its share of training.threads. The first stopping signal makes
// every run save and stop.
func runSweepAll(opts *sweepOptions, sw *sweep.Sweep, p *sweep.Plan) error {
	rep := newReporter(opts.deps, time.Hour, true)
	ctx, sig, release := stopOnSignals(opts.cmdContext, rep, sw.Dir)
	defer release()
	var errs []error
	var mu sync.Mutex // keeps each run's final line whole
	sw.RunAll(ctx, p, opts.Parallel, func(e sweep.Entry) sweep.RunOptions {
		return sweepRunOptions(opts, rep, &prefixObserver{rep: rep, prefix: fmt.Sprintf("run %d: ", e.Index)}, 0)
	}, func(e sweep.Entry, out *sweep.Outcome, err error) {
		mu.Lock()
		defer mu.Unlock()
		err = sweepRunEnd(opts, e.Index, out, err, sig)
		if err != nil {
			fmt.Fprintf(opts.Err, "weft: %s\n", oneLine(err.Error()))
		}
		errs = append(errs, err)
	})
	// The worst status wins: for good, failed, interrupted, busy, done.
	worst, rank := 0, map[int]int{exitOK: 0, exitBusy: 1, exitInterrupted: 2, exitFailure: 3, exitForGood: 4}
	for _, err := range errs {
		code := exitOK
		var ee *exitError
		switch {
		case err == nil:
		case errors.As(err, &ee):
			code = ee.code
		default:
			code = exitFailure
		}
		if rank[code] > rank[worst] {
			worst = code
		}
	}
	if ctx.Err() != nil && worst == exitOK {
		worst = exitInterrupted
	}
	if worst != exitOK {
		// The lines above say what went wrong with each run.
		return &exitError{code: worst, err: errors.New("")}
	}
	return nil
}

// prefixObserver passes a run's warnings on, named by the run; the local
// runner prints nothing else while runs train side by side.
type prefixObserver struct {
	rep    *reporter
	prefix string
}

func (o *prefixObserver) Started(runs.Start)        {}
func (o *prefixObserver) Progress(runs.Status)      {}
func (o *prefixObserver) Validated(runs.Validation) {}
func (o *prefixObserver) Notice(n runs.Notice) {
	if n.Warning {
		o.rep.warnf("%s%s", o.prefix, n.Text)
	}
}

// recordedPlan is the plan status and compare show: the one recorded in
// the sweep directory (even when the sweep file has changed since), else
// the sweep file's own.
func recordedPlan(opts *sweepOptions, sw *sweep.Sweep) (*sweep.Plan, error) {
	p, err := sweep.ReadPlan(sw.Dir)
	if err != nil || p != nil {
		return p, err
	}
	return planSweep(opts.ctx, sw, false)
}

func runSweepStatus(opts *sweepOptions) error {
	sw, err := loadSweep(opts.Sweep)
	if err != nil {
		return err
	}
	p, err := recordedPlan(opts, sw)
	if err != nil {
		return err
	}
	now := opts.Now()
	sts, err := sw.Status(p, now)
	if err != nil {
		return err
	}
	counts := map[string]int{}
	for _, st := range sts {
		counts[st.State]++
	}
	states := []string{sweep.StateDone, sweep.StateRunning, sweep.StatePartial, sweep.StateStale, sweep.StateFailed, sweep.StatePending}
	if opts.JSON {
		return writeJSONLine(opts.Out, struct {
			Runs    []sweep.RunStatus `json:"runs"`
			Summary map[string]int    `json:"summary"`
		}{sts, counts})
	}
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "run\tstate\tstep\tbest val bits/char\ttokens/s\thost\tlast heartbeat\tsettings")
	for _, st := range sts {
		beat := "-"
		if !st.Heartbeat.IsZero() {
			beat = roundDuration(now.Sub(st.Heartbeat)).String() + " ago"
		}
		host := st.Host
		if host == "" {
			host = "-"
		}
		state := st.State
		if st.Message != "" && st.State == sweep.StateFailed {
			state += ": " + st.Message
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", st.Index, state, thousands(st.Step), num(float64(st.BestBPC), 4),
			num(math.Round(float64(st.TokensPerSec)), 0), host, beat, st.Settings)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	var parts []string
	for _, s := range states {
		if counts[s] > 0 {
			parts = append(parts, fmt.Sprintf("%d %s", counts[s], s))
		}
	}
	fmt.Fprintf(opts.Out, "\n%d runs: %s\n", len(sts), strings.Join(parts, ", "))
	return nil
}

func runSweepCompare(opts *sweepOptions) error {
	if opts.Split != "test" && opts.Split != "validation" {
		return usagef("--split must be test or validation, got %q", opts.Split)
	}
	sw, err := loadSweep(opts.Sweep)
	if err != nil {
		return err
	}
	p, err := recordedPlan(opts, sw)
	if err != nil {
		return err
	}
	all, err := sw.Compare(opts.ctx, p, opts.Split)
	if errors.Is(err, sweep.ErrNoneDone) {
		return fmt.Errorf("sweep %s: no run is done yet ('weft sweep status %s' shows where they stand)", opts.Sweep, opts.Sweep)
	}
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSONLine(opts.Out, all)
	}
	for n, c := range all {
		if n > 0 {
			fmt.Fprintln(opts.Out)
		}
		if len(all) > 1 {
			fmt.Fprintf(opts.Out, "runs sharing data settings (baselines %s)\n", c.Baselines)
		}
		printComparison(opts.Out, c.Table, c.Table.Rows)
	}
	return nil
}
