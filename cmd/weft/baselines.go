package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/eval"
)

// baselines is the fitted baseline ladder of a run.
type baselines struct {
	ladder *eval.Ladder
	cands  []*candidate
}

// fitBaselines fits (or loads from the run's baselines folder dir, "" for
// none) the configured ladder through runs.FitBaselines, and makes a
// comparison candidate of each model.
func fitBaselines(ctx context.Context, cfg eval.Config, ds *data.Dataset, dir string, prog *stageProgress) (*baselines, error) {
	ladder, err := runs.FitBaselines(ctx, cfg, ds, dir, prog.Func(), prog.Status)
	if err != nil {
		return nil, err
	}
	prog.finish()
	bl := &baselines{ladder: ladder}
	for _, m := range ladder.Models() {
		c := &candidate{name: m.Name(), kind: "baseline", model: m}
		if k, ok := m.(eval.Kinder); ok {
			c.kind = k.Kind()
		}
		if sb, ok := m.(eval.StateBitser); ok {
			c.stateBits = sb.StateBits()
		}
		bl.cands = append(bl.cands, c)
	}
	return bl, nil
}

type baselinesOptions struct {
	cmdContext
	Target string // a run file or a run directory
	Run    string
	Set    []string
	JSON   bool
}

func newBaselinesCmd(d *deps, runF func(*baselinesOptions) error) *cobra.Command {
	opts := &baselinesOptions{}
	cmd := &cobra.Command{
		Use:   "baselines CONFIG-or-RUN",
		Short: "Fit the n-gram, Markov-chain and hidden-Markov baselines and score them on validation",
		Long: `Fit the baseline ladder of the run's [evaluation] section on the training split:
n-gram models at every configured order with every configured smoother
(maximum likelihood, add-k, Witten-Bell, absolute discounting, Kneser-Ney,
modified Kneser-Ney), fixed-order Markov chains and hidden Markov models
trained by Baum-Welch. Prints their validation bits per character (the test
split is left for 'weft eval') and caches them in the run directory's
baselines folder, where 'weft eval' and 'weft score' find them.

The argument is a run directory, or a run file with --run DIR.`,
		Args: exactArgs(1, "a run file or a run directory"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Target = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runBaselines(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory to cache the baselines in (with a run file)")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the validation scores as JSON")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

// resolveTarget reads the run of a "CONFIG-or-RUN" argument: a run
// directory's saved run file, or the given run file with runFlag as its
// directory ("" for none).
func resolveTarget(target, runFlag string, sets []string) (*configs.Run, string, error) {
	fi, err := os.Stat(target)
	if err != nil {
		return nil, "", fmt.Errorf("%s: %w", target, unwrapPath(err))
	}
	if fi.IsDir() {
		if runFlag != "" && filepath.Clean(runFlag) != filepath.Clean(target) {
			return nil, "", usagef("give either a run directory or --run, not both")
		}
		r, err := runs.ReadRunFile(target, sets)
		return r, target, err
	}
	r, err := configs.Load(target, sets)
	return r, runFlag, err
}

func runBaselines(opts *baselinesOptions) error {
	r, dir, err := resolveTarget(opts.Target, opts.Run, opts.Set)
	if err != nil {
		return err
	}
	var rd *runs.Dir
	if dir != "" {
		if rd, err = openRunDir(dir); err != nil {
			return err
		}
		defer rd.Close()
	}
	ds, err := prepareData(opts.cmdContext, r, rd)
	if err != nil {
		return err
	}
	prog := newStageProgress(opts.deps, opts.JSON)
	blDir := ""
	if rd != nil {
		blDir = rd.Baselines()
	}
	bl, err := fitBaselines(opts.ctx, r.Evaluation.Config, ds, blDir, prog)
	if err != nil {
		return err
	}
	if len(bl.cands) == 0 {
		return fmt.Errorf("no baselines configured: set evaluation.ngram_orders and ngram_smoothers, markov_orders or hmm_states")
	}
	var rows []eval.Result
	var chars int64
	score := prog.Func()
	for i, c := range bl.cands {
		if score != nil {
			score("score baselines on validation", i, len(bl.cands))
		}
		lp := make([]float64, len(ds.Validation.Tokens))
		if chars == 0 {
			chars = ds.Validation.CountedCharacters() // eval.Compare's denominator
		}
		if err := c.model.LogProbs(opts.ctx, lp, ds.Validation.Tokens); err != nil {
			return fmt.Errorf("score %s: %w", c.name, err)
		}
		res := eval.NewResult(c.name, c.kind, "validation", lp, int(chars))
		res.StateBits = c.stateBits
		rows = append(rows, res)
	}
	if score != nil {
		score("score baselines on validation", len(bl.cands), len(bl.cands))
	}
	prog.finish()
	sortBestFirst(rows)
	if opts.JSON {
		enc := json.NewEncoder(opts.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(rows)
	}
	fmt.Fprintf(opts.Out, "baselines fitted on %s training tokens; validation split, best first\n\n", thousands(int64(len(ds.Train.Tokens))))
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "model\tkind\tbits/char\tbits/token\tperplexity")
	for _, res := range rows {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", res.Model, res.Kind, num(res.BitsPerChar, 3), num(res.BitsPerToken, 3), num(res.Perplexity, 2))
	}
	tw.Flush()
	if rd != nil {
		fmt.Fprintf(opts.Out, "\ncached in %s\n", blDir)
	}
	return nil
}
