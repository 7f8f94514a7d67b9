package main

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/eval"
)

type evalOptions struct {
	cmdContext
	Run        string
	Checkpoint string
	Split      string
	Set        []string
	JSON       bool
	Streams    int
	Warmup     int
	NoRNN      bool
	All        bool
	Top        int
	Threads    int
}

func newEvalCmd(d *deps, runF func(*evalOptions) error) *cobra.Command {
	opts := &evalOptions{}
	cmd := &cobra.Command{
		Use:     "eval --run DIR",
		Example: "  weft eval --run runs/night",
		Short:   "Compare the trained model with the baselines on the held-out test split",
		Long: `Score the run's best checkpoint (or --checkpoint) and every baseline of its
[evaluation] section on the test split (or --split validation) and print one
table, best first: bits per character with its block-bootstrap interval, the
difference from the best baseline with its paired interval, bits per token and
perplexity. The best baseline and the interpolation weight of the recurrent
model mixed with the best n-gram are chosen on the validation split: with
--split test never on the split reported; with --split validation the table
says that those rows were chosen on it and are optimistic. Baselines missing
from the run directory are fitted first and cached.

The recurrent model is scored with its state carried through the whole split
as one continuous stream, from a zero state at its start (exact). --streams N
scores N pieces side by side instead, each warmed up on the --warmup tokens
before it: faster, and an approximation at the N-1 piece starts.`,
		Args: exactArgs(0, "no arguments (name the run with --run)"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if opts.Split != "test" && opts.Split != "validation" {
				return usagef("--split must be test or validation, got %q", opts.Split)
			}
			if runF != nil {
				return runF(opts)
			}
			return runEval(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory (required)")
	cmd.Flags().StringVar(&opts.Checkpoint, "checkpoint", "best", `checkpoint to score: "best", "latest", a step number or a file name`)
	cmd.Flags().StringVar(&opts.Split, "split", "test", "held-out split to report: test or validation")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the rows as JSON")
	cmd.Flags().IntVar(&opts.Streams, "streams", 1, "score the recurrent model as this many pieces side by side (1 is exact)")
	cmd.Flags().IntVar(&opts.Warmup, "warmup", 256, "tokens each piece after the first is warmed up on, with --streams")
	cmd.Flags().BoolVar(&opts.NoRNN, "baselines-only", false, "compare the baselines alone, without a trained model")
	cmd.Flags().BoolVar(&opts.All, "all", false, "list every row (by default the best of each family: each smoother, Markov chains, HMMs, the recurrent and interpolated rows)")
	cmd.Flags().IntVar(&opts.Top, "top", 0, "list the N best rows")
	addThreadsFlag(cmd, &opts.Threads, 1, " (on the recurrent model's matrix products)")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

func runEval(opts *evalOptions) error {
	if opts.Run == "" {
		return usagef("--run DIR is required")
	}
	if opts.Threads < 1 {
		return usagef("--threads must be at least 1, got %d", opts.Threads)
	}
	r, dir, err := resolveTarget(opts.Run, "", opts.Set)
	if err != nil {
		return err
	}
	rd, err := openRunDir(dir)
	if err != nil {
		return err
	}
	defer rd.Close()
	cmp, err := evaluateRun(opts.cmdContext, r, rd, evalSettings{
		Checkpoint: opts.Checkpoint, Split: opts.Split, Streams: opts.Streams, Warmup: opts.Warmup,
		NoRNN: opts.NoRNN, Quiet: opts.JSON, Threads: opts.Threads,
	})
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSON(opts.Out, cmp) // the eval report format, eval.ReportVersion
	}
	if opts.Top < 0 {
		return usagef("--top must be 1 or more, got %d", opts.Top)
	}
	printComparison(opts.Out, cmp, shownRows(cmp, opts.All, opts.Top))
	return nil
}

type evalSettings struct {
	Checkpoint      string
	Split           string
	Streams, Warmup int
	NoRNN           bool
	Quiet           bool
	Threads         int
}

// evaluateRun compares a run's model and its baselines (runs.Evaluate,
// which saves the comparison in the report folder) and draws the plots.
func evaluateRun(cc cmdContext, r *configs.Run, rd *runs.Dir, s evalSettings) (*eval.Comparison, error) {
	prog := newStageProgress(cc.deps, s.Quiet)
	cmp, err := runs.Evaluate(cc.ctx, r, rd, runs.EvalOptions{Checkpoint: s.Checkpoint, Split: s.Split, Streams: s.Streams, Warmup: s.Warmup,
		BaselinesOnly: s.NoRNN, Threads: s.Threads, Progress: prog.Func(), Note: prog.Status, Stdin: cc.In})
	var me *runs.ModelError
	switch {
	case errors.As(err, &me):
		return nil, fmt.Errorf("%w (train first, or pass --baselines-only)", err)
	case errors.Is(err, runs.ErrScoring):
		return nil, usagef("%s", strings.TrimPrefix(err.Error(), runs.ErrScoring.Error()+": "))
	case err != nil:
		return nil, err
	}
	prog.finish()
	if r.Output.Plots {
		if err := plotComparison(filepath.Join(rd.Report(), "comparison-"+cmp.Split+".png"), cmp); err != nil {
			return nil, err
		}
		if err := plotLearningCurve(filepath.Join(rd.Report(), "learning-curve.png"), rd.Metrics(), cmp); err != nil {
			return nil, err
		}
	}
	return cmp, nil
}
