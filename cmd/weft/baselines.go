package main

import (
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/eval"
)

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
		Use:   "baselines [CONFIG] --run DIR",
		Short: "Fit the n-gram, Markov-chain and hidden-Markov baselines and score them on validation",
		Long: `Fit the baseline ladder of the run's [evaluation] section on the training split:
n-gram models at every configured order with every configured smoother
(maximum likelihood, add-k, Witten-Bell, absolute discounting, Kneser-Ney,
modified Kneser-Ney), fixed-order Markov chains and hidden Markov models
trained by Baum-Welch. Prints their validation bits per character (the test
split is left for 'weft eval') and caches them in the run directory's
baselines folder, where 'weft eval' and 'weft score' find them.

With --run DIR alone the run is the one saved in DIR (by 'weft prepare' or
'weft train'); with a run file too, the baselines of that run are fitted
and cached in DIR. A run file alone fits them without caching.`,
		Example: "  weft baselines --run runs/night",
		Args:    rangeArgs(0, 1, "at most one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if len(args) == 1 {
				opts.Target = args[0]
			}
			if runF != nil {
				return runF(opts)
			}
			return runBaselines(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory: its saved run, or where a run file's baselines are cached")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the validation scores as JSON")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

// resolveTarget reads the run of a run-file-or-run-directory argument: a run
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
	switch {
	case opts.Target == "" && opts.Run == "":
		return usagef("give --run DIR (and a run file to fit that run's baselines there)")
	case opts.Target == "":
		opts.Target = opts.Run
	case isDir(opts.Target):
		deprecated(opts.deps, "'weft baselines DIR'", "'weft baselines --run DIR'")
	}
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
	ladder, err := runs.FitBaselines(opts.ctx, r.Evaluation.Config, ds, blDir, prog.Func(), prog.Status)
	if err != nil {
		return err
	}
	models := runs.BaselineEntrants(ladder)
	if len(models) == 0 {
		return fmt.Errorf("no baselines configured: set evaluation.ngram_orders and ngram_smoothers, markov_orders or hmm_states")
	}
	rows, err := runs.ScoreOnValidation(opts.ctx, ds, r.Evaluation.HeldOutTokens, models, prog.Func())
	if err != nil {
		return err
	}
	prog.finish()
	noted := false
	for i := range rows { // in the order of models, before sorting
		rows[i].SetTrainingNote(models[i].Model)
		noted = noted || rows[i].TrainingNote != ""
	}
	eval.SortBestFirst(rows)
	if opts.JSON {
		return writeJSON(opts.Out, rows)
	}
	scored := "validation split"
	if n := ds.Validation.Tokens.Len(); len(rows) > 0 && rows[0].Tokens < n {
		scored = fmt.Sprintf("the first %s of %s validation tokens (evaluation.heldout_tokens)", thousands(int64(rows[0].Tokens)), thousands(int64(n)))
	}
	fmt.Fprintf(opts.Out, "baselines fitted on %s training tokens; %s, best first\n\n", thousands(int64(ds.Train.Tokens.Len())), scored)
	if noted {
		fmt.Fprintf(opts.Out, "the n-gram counts stop at evaluation.ngram_memory = %q: the rows noted so counted a seeded subset of the training split\n\n", r.Evaluation.NgramMemory)
	}
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	header := "model\tkind\tbits/char\tbits/token\tperplexity"
	if noted {
		header += "\tnote"
	}
	fmt.Fprintln(tw, header)
	for _, res := range rows {
		line := fmt.Sprintf("%s\t%s\t%s\t%s\t%s", res.Model, res.Kind, num(res.BitsPerChar, 3), num(res.BitsPerToken, 3), num(res.Perplexity, 2))
		if noted {
			line += "\t" + res.TrainingNote
		}
		fmt.Fprintln(tw, line)
	}
	tw.Flush()
	if rd != nil {
		fmt.Fprintf(opts.Out, "\ncached in %s\n", blDir)
	}
	return nil
}
