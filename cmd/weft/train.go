package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/checkpoint/runs/report"
	"weft/configs"
	"weft/rnn"
)

// exitAbandoned is the status of a run stopped by a second signal, which
// exits at once without saving (128 + SIGINT's number, the shell's
// convention for a process killed by Ctrl-C). The newest checkpoint on disk
// is intact; running the same command again resumes from it.
const exitAbandoned = 130

type trainOptions struct {
	cmdContext
	Config  string
	Run     string
	Set     []string
	Restart bool
	Replan  bool
	For     time.Duration
	Until   string
	Steps   int
	Threads int
	Quiet   bool

	threadsSet bool // --threads was given
}

func newTrainCmd(d *deps, runF func(*trainOptions) error) *cobra.Command {
	opts := &trainOptions{}
	cmd := &cobra.Command{
		Use:     "train CONFIG --run DIR",
		Example: "  weft train night.toml --run runs/night --until 07:00",
		Short:   "Train a model as a run file says, in a run directory that survives interruptions",
		Long: `Train the model a run file describes, keeping everything in the run
directory: the resolved run file, the vocabulary, the split report, the
metrics log (metrics.jsonl) and the checkpoints.

Run the same command again on the same directory to resume exactly where the
newest intact checkpoint left off. On resume only the budgets, the
evaluation and saving cadence, the output settings and the thread count may
change; other changes are refused with the keys named. --restart starts over
after moving the old checkpoints aside.

The run stops at the first budget reached: training.max_steps, max_epochs,
max_tokens, max_duration, --for, --until, --steps. It then validates, saves
and exits 0. SIGINT, SIGTERM and SIGUSR1 make it finish the current window,
save and exit 3; a second signal exits at once with status 130.

With a time budget and no step budget, schedule = "cosine" or "linear"
without its length anneals to the deadline: the run times its first windows
(12 after 2 untimed, or up to a minute on a long night), plans the step at
which the rate reaches min_learning_rate (keeping 10% of the time left as
margin), records the plan in plan.json and the checkpoints, and ends there.
A resumed run keeps its plan; --replan measures again and plans from the
time left.`,
		Args: exactArgs(1, "one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.threadsSet = cmd.Flags().Changed("threads")
			opts.Config = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runTrain(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory (created if missing, resumed if it holds checkpoints)")
	f.BoolVar(&opts.Restart, "restart", false, "start over, moving the old checkpoints aside to checkpoints.old-TIME")
	f.BoolVar(&opts.Replan, "replan", false, "on resume, measure the speed again and re-plan where a schedule annealing to the deadline ends")
	f.DurationVar(&opts.For, "for", 0, "stop after training this long in this invocation (e.g. 8h, 90m)")
	f.StringVar(&opts.Until, "until", "", "stop at this local time of day (HH:MM, the next occurrence) or an RFC 3339 time")
	f.IntVar(&opts.Steps, "steps", 0, "stop at this many training steps in all (sets training.max_steps)")
	f.BoolVar(&opts.Quiet, "quiet", false, "print no progress, only warnings and the final summary")
	addThreadsFlag(cmd, &opts.Threads, 0, " (sets training.threads, which may change on resume; 0: as the model's shapes and the cores suit; default: the run file's)")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

func runTrain(opts *trainOptions) error {
	if opts.Run == "" {
		return usagef("--run DIR is required: the run directory keeps the checkpoints")
	}
	if opts.For < 0 {
		return usagef("--for must be a positive duration such as 8h, got %v", opts.For)
	}
	if opts.Steps < 0 {
		return usagef("--steps must be positive, got %d", opts.Steps)
	}
	o := trainRunOptions{Duration: opts.For, Restart: opts.Restart, Replan: opts.Replan, Quiet: opts.Quiet}
	if opts.Until != "" {
		t, err := parseUntil(opts.Until, opts.Now())
		if err != nil {
			return usagef("--until: %v", err)
		}
		o.Deadline = t
	}
	sets := opts.Set
	if opts.Steps > 0 {
		sets = append(append([]string(nil), sets...), fmt.Sprintf("training.max_steps=%d", opts.Steps))
	}
	if opts.threadsSet {
		sets = append(append([]string(nil), sets...), fmt.Sprintf("training.threads=%d", opts.Threads))
	}
	r, err := configs.Load(opts.Config, sets)
	if err != nil {
		return err
	}
	res, err := trainRun(opts.cmdContext, r, opts.Run, o)
	if err != nil {
		return err
	}
	if res.Interrupted {
		return &exitError{code: exitInterrupted, err: fmt.Errorf("stopped by %s at step %d; the state is saved in %s: run the same command again to resume",
			res.Signal, res.Steps, res.LatestPath)}
	}
	return nil
}

// parseUntil reads --until: a local time of day "HH:MM" (or "HH:MM:SS"),
// meaning its next occurrence after now, or a full RFC 3339 time.
func parseUntil(s string, now time.Time) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		if !t.After(now) {
			return time.Time{}, fmt.Errorf("%s is in the past", s)
		}
		return t, nil
	}
	var clock time.Time
	var err error
	for _, layout := range []string{"15:04", "15:04:05"} {
		if clock, err = time.Parse(layout, s); err == nil {
			break
		}
	}
	if err != nil {
		return time.Time{}, fmt.Errorf("%q is not a time of day such as 07:00 or an RFC 3339 time", s)
	}
	y, m, d := now.Date()
	t := time.Date(y, m, d, clock.Hour(), clock.Minute(), clock.Second(), 0, now.Location())
	if !t.After(now) {
		t = time.Date(y, m, d+1, clock.Hour(), clock.Minute(), clock.Second(), 0, now.Location())
	}
	return t, nil
}

// Seams for tests: the checkpoint writer (to inject a full disk), a hook
// after every training step, and the immediate exit of a second signal.
var (
	saveCheckpoint = checkpoint.Save
	trainStepHook  func(step int64, net *rnn.Model[float32])
	exitNow        = os.Exit
)

// trainRunOptions are the settings of one training invocation that are
// not part of the run file.
type trainRunOptions struct {
	// Duration is the time budget of this invocation (--for); 0 means none
	// (training.max_duration still applies).
	Duration time.Duration
	// Deadline is the wall-clock time to stop at (--until); zero means none.
	Deadline time.Time
	// Restart moves old checkpoints aside and starts over.
	Restart bool
	// Replan re-measures and re-plans a deadline schedule on resume.
	Replan bool
	// Quiet prints no progress, only warnings.
	Quiet bool
}

// trainResult is what a training invocation reached, with the signal that
// stopped it when one did.
type trainResult struct {
	*runs.Result
	Signal string
}

// trainRun trains r in runDir through runs.Train, drawing its progress and
// turning the first stopping signal into a graceful stop (the session
// finishes the window and saves) and a second into an immediate exit. demo
// calls it too.
func trainRun(cc cmdContext, r *configs.Run, runDir string, o trainRunOptions) (*trainResult, error) {
	rep := newReporter(cc.deps, time.Duration(r.Output.LogEverySeconds*float64(time.Second)), o.Quiet)
	defer rep.finish()
	ctx, sig, release := stopOnSignals(cc, rep, filepath.Join(runDir, runs.CheckpointsDir))
	defer release()
	page := report.Watch(runDir, &trainObserver{rep: rep}, cc.Now, func(s string) { rep.warnf("%s", s) })
	res, err := runs.Train(ctx, r, runDir, runs.TrainOptions{
		Duration: o.Duration, Deadline: o.Deadline, Restart: o.Restart, Replan: o.Replan,
		Observer: page, Now: cc.Now, Save: saveCheckpoint, AfterStep: trainStepHook, Stdin: cc.In,
	})
	signal, _ := sig.Load().(string)
	page.Finish(res, err, signal)
	if err != nil {
		return nil, err
	}
	rep.finish()
	out := &trainResult{Result: res}
	if res.Interrupted {
		out.Signal, _ = sig.Load().(string)
		if out.Signal == "" {
			out.Signal = "cancellation"
		}
	} else if !res.NothingToDo {
		fmt.Fprintf(cc.Out, "%s at step %s (%d epochs completed).", res.Reason, thousands(res.Steps), res.Epochs)
		if res.BestPath != "" && finite(res.BestValBitsPerChar) {
			fmt.Fprintf(cc.Out, " Best validation: %.4f bits per character at step %s (%s).", res.BestValBitsPerChar, thousands(res.BestStep), res.BestPath)
		}
		fmt.Fprintf(cc.Out, " Newest checkpoint: %s\n", res.LatestPath)
		if t := planText(res); t != "" {
			fmt.Fprintln(cc.Out, t)
		}
	}
	return out, nil
}

// stopOnSignals gives a context that the first stopping signal cancels
// (the work then saves and stops), with the signal's name kept in sig; a
// second signal exits at once, saying the checkpoints in where are intact.
// release ends the watch.
func stopOnSignals(cc cmdContext, rep *reporter, where string) (ctx context.Context, sig *atomic.Value, release func()) {
	ctx, stop := context.WithCancel(cc.ctx)
	sig = new(atomic.Value)
	if cc.Signals == nil {
		return ctx, sig, stop
	}
	done := make(chan struct{})
	unclaim := cc.claimSignals()
	go watchSignals(cc.Signals, done, stop, sig, rep, where)
	return ctx, sig, func() { close(done); unclaim(); stop() }
}

// watchSignals turns the first stopping signal into a graceful stop and a
// second into an immediate exit.
func watchSignals(signals <-chan os.Signal, done <-chan struct{}, stop context.CancelFunc, name *atomic.Value, rep *reporter, ckdir string) {
	n := 0
	for {
		select {
		case <-done:
			return
		case sig := <-signals:
			n++
			if n == 1 {
				name.Store(signalName(sig))
				rep.warnf("%s: finishing the current window and saving; send it again to quit at once without saving", signalName(sig))
				stop()
				continue
			}
			rep.warnf("second %s: exiting at once without saving (status %d); the checkpoints in %s are intact", signalName(sig), exitAbandoned, ckdir)
			exitNow(exitAbandoned)
			return
		}
	}
}

// signalName names the stopping signals as a user knows them.
func signalName(sig os.Signal) string {
	switch sig {
	case os.Interrupt:
		return "SIGINT"
	case syscall.SIGTERM:
		return "SIGTERM"
	case syscall.SIGUSR1:
		return "SIGUSR1"
	}
	return sig.String()
}

// trainObserver prints what a training session reports through the
// reporter: the start line, validations, notices and the progress display.
type trainObserver struct{ rep *reporter }

func (o *trainObserver) Started(st runs.Start) {
	what := "training"
	if st.ResumedFrom != "" {
		what = fmt.Sprintf("resuming from %s: step %d, %d epochs completed;", st.ResumedFrom, st.Step, st.Epochs)
	}
	o.rep.logf("%s %s, %s parameters, %s training tokens, %d streams × %d steps, %s",
		what, st.Model, thousands(st.Params), thousands(st.TrainTokens), st.Streams, st.UnrollSteps, budgetText(st.Budget))
}

func (o *trainObserver) Progress(st runs.Status) { o.rep.update(st) }

func (o *trainObserver) Validated(v runs.Validation) {
	note := " (best so far)"
	if !v.Improved {
		note = fmt.Sprintf(" (best %.4f at step %s)", v.BestBitsPerChar, thousands(v.BestStep))
	}
	o.rep.logf("validation at step %s: %.4f bits per character, perplexity %.3f, %.4f nats per token%s",
		thousands(v.Step), v.BitsPerChar, v.Perplexity, v.CrossEntropy, note)
	if v.LearningRateDivided {
		o.rep.logf("validation loss stopped improving: learning rate divided to %g", v.LearningRate)
	}
}

func (o *trainObserver) Notice(n runs.Notice) {
	if n.Warning {
		o.rep.warnf("%s", n.Text)
		return
	}
	o.rep.logf("%s", n.Text)
}

// planText says how a run annealing to its deadline ended against its
// plan, or "" for a run without one.
func planText(res *runs.Result) string {
	if res.PlannedSteps == 0 {
		return ""
	}
	if res.Steps >= res.PlannedSteps {
		t := fmt.Sprintf("Planned end: step %s, reached", thousands(res.PlannedSteps))
		if !res.Deadline.IsZero() {
			t += fmt.Sprintf(" %s before the deadline (on time)", roundDuration(res.Deadline.Sub(res.Ended)))
		}
		return t + "; the learning rate is at its floor."
	}
	return fmt.Sprintf("Planned end: step %s, not reached: stopped %s steps short, the learning rate above its floor (late; --replan on the next resume plans from the measured speed).",
		thousands(res.PlannedSteps), thousands(res.PlannedSteps-res.Steps))
}

func budgetText(b runs.Budget) string {
	var parts []string
	if b.MaxSteps > 0 {
		parts = append(parts, fmt.Sprintf("%s steps", thousands(int64(b.MaxSteps))))
	}
	if b.MaxEpochs > 0 {
		parts = append(parts, fmt.Sprintf("%d epochs", b.MaxEpochs))
	}
	if b.MaxTokens > 0 {
		parts = append(parts, fmt.Sprintf("%s tokens", thousands(b.MaxTokens)))
	}
	if !b.Deadline.IsZero() {
		parts = append(parts, "until "+b.Deadline.Format("2006-01-02 15:04:05"))
	}
	if len(parts) == 0 {
		return "no budget (stop with Ctrl-C; the state is saved)"
	}
	if len(parts) == 1 {
		return "budget: " + parts[0]
	}
	return "budget: " + strings.Join(parts, ", ") + ", whichever comes first"
}
