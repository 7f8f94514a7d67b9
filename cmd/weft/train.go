package main

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"time"

	toml "github.com/pelletier/go-toml/v2"
	"github.com/spf13/cobra"

	"weft/checkpoint"
	"weft/configs"
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
	For     time.Duration
	Until   string
	Steps   int
	Quiet   bool
}

func newTrainCmd(d *deps, runF func(*trainOptions) error) *cobra.Command {
	opts := &trainOptions{}
	cmd := &cobra.Command{
		Use:   "train CONFIG --run DIR",
		Short: "Train a model as a run file says, in a run directory that survives interruptions",
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
save and exit 3; a second signal exits at once with status 130.`,
		Args: exactArgs(1, "one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
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
	f.DurationVar(&opts.For, "for", 0, "stop after training this long in this invocation (e.g. 8h, 90m)")
	f.StringVar(&opts.Until, "until", "", "stop at this local time of day (HH:MM, the next occurrence) or an RFC 3339 time")
	f.IntVar(&opts.Steps, "steps", 0, "stop at this many training steps in all (sets training.max_steps)")
	f.BoolVar(&opts.Quiet, "quiet", false, "print no progress, only warnings and the final summary")
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
	o := trainRunOptions{Duration: opts.For, Restart: opts.Restart, Quiet: opts.Quiet}
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
	// Quiet prints no progress, only warnings.
	Quiet bool
}

// trainResult is what a training invocation reached.
type trainResult struct {
	BestPath   string // the best-validation checkpoint, "" when none
	LatestPath string // the newest checkpoint
	Steps      int64  // training steps in all (all invocations)
	Epochs     int    // completed epochs
	// BestValBitsPerChar is the best validation bits per character, NaN
	// when the run never validated.
	BestValBitsPerChar float64
	// Interrupted says a signal stopped the run (after it saved).
	Interrupted bool
	Signal      string // the signal that stopped it
	// Reason says why the run ended: the budget reached, early stopping,
	// or "interrupted".
	Reason string
	// ResumedFrom is the checkpoint this invocation started from, "" for
	// a fresh start.
	ResumedFrom string
}

// safeOnResume reports whether a run-file key may change between the
// invocations of one run without changing what has been trained: the
// budgets, the evaluation and saving cadence, the output settings and the
// thread count. r is the new run.
func safeOnResume(key string, r *configs.Run) bool {
	switch key {
	case "training.max_steps":
		// The cosine schedule's length defaults to max_steps.
		return !(r.Training.Schedule == "cosine" && r.Training.CosineSteps == 0)
	case "training.max_epochs", "training.max_tokens", "training.max_duration",
		"training.early_stop_patience", "training.threads",
		"training.divergence_factor", "training.divergence_retries", "training.divergence_lr_factor":
		return true
	}
	for _, p := range []string{"evaluation.", "checkpoint.", "output."} {
		if strings.HasPrefix(key, p) {
			return true
		}
	}
	return false
}

// changedKeys compares two resolved run files key by key (configs.Keys)
// and returns the keys whose values differ, sorted.
func changedKeys(old, cur []byte) ([]string, error) {
	var a, b map[string]any
	if err := toml.Unmarshal(old, &a); err != nil {
		return nil, fmt.Errorf("run file recorded in the checkpoint: %w", err)
	}
	if err := toml.Unmarshal(cur, &b); err != nil {
		return nil, err
	}
	lookup := func(m map[string]any, key string) any {
		sec, name, _ := strings.Cut(key, ".")
		t, ok := m[sec].(map[string]any)
		if !ok {
			return nil
		}
		return t[name]
	}
	var out []string
	for _, k := range configs.Keys() {
		if !reflect.DeepEqual(lookup(a, k), lookup(b, k)) {
			out = append(out, k)
		}
	}
	sort.Strings(out)
	return out, nil
}

// moveAside renames the run's checkpoints folder and metrics log to names
// stamped with the time, for --restart.
func moveAside(rd *runDir, now time.Time) ([]string, error) {
	stamp := now.Format("20060102-150405")
	var moved []string
	move := func(name, dest string) error {
		src := rd.file(name)
		if _, err := os.Lstat(src); errors.Is(err, os.ErrNotExist) {
			return nil
		}
		dst := rd.file(dest)
		for i := 2; ; i++ {
			if _, err := os.Lstat(dst); errors.Is(err, os.ErrNotExist) {
				break
			}
			dst = rd.file(fmt.Sprintf("%s-%d", dest, i))
		}
		if err := os.Rename(src, dst); err != nil {
			return fmt.Errorf("restart: move %s aside: %w", src, unwrapPath(err))
		}
		moved = append(moved, filepath.Base(src)+" → "+filepath.Base(dst))
		return nil
	}
	if err := move(checkpointsDir, checkpointsDir+".old-"+stamp); err != nil {
		return moved, err
	}
	if err := move(metricsFile, strings.TrimSuffix(metricsFile, ".jsonl")+".old-"+stamp+".jsonl"); err != nil {
		return moved, err
	}
	return moved, nil
}

// checkResume refuses a resume whose run file changed in a key that is not
// safe to change.
func checkResume(f *checkpoint.File, path string, runTOML []byte, r *configs.Run) error {
	old, ok := f.Meta[checkpoint.MetaRunConfig]
	if !ok {
		return fmt.Errorf("checkpoint %s records no run file; cannot check it belongs to this run (use --restart to start over)", path)
	}
	keys, err := changedKeys([]byte(old), runTOML)
	if err != nil {
		return fmt.Errorf("checkpoint %s: %w", path, err)
	}
	var unsafe []string
	for _, k := range keys {
		if !safeOnResume(k, r) {
			unsafe = append(unsafe, k)
		}
	}
	if len(unsafe) > 0 {
		return fmt.Errorf("the run file differs from the one this run was trained with in %s, which cannot change on resume "+
			"(only budgets, evaluation, checkpoint and output settings and training.threads may); use another --run directory, or --restart to start over",
			strings.Join(unsafe, ", "))
	}
	return nil
}

// sameVocab reports whether the vocabulary a checkpoint records is the one
// prepared now (the corpus and its settings are unchanged).
func sameVocab(f *checkpoint.File, cur []byte) bool {
	return bytes.Equal([]byte(f.Meta[checkpoint.MetaVocab]), cur)
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
