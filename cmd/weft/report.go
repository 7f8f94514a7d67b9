package main

import (
	"errors"
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/checkpoint/runs/report"
	"weft/eval"
)

type reportOptions struct {
	cmdContext
	Run     string
	Compare bool
	Dirs    []string
	Page    string
	Stretch int
}

func newReportCmd(d *deps, runF func(*reportOptions) error) *cobra.Command {
	opts := &reportOptions{}
	cmd := &cobra.Command{
		Use:     "report (--run DIR | --compare DIR...)",
		Example: "  weft report --run runs/night\n  weft report --compare runs/a runs/b",
		Short:   "Write the morning report of a run: one self-contained HTML page",
		Long: `Write report/index.html in the run directory: one self-contained page (no
network, no external file) with the learning curves, the learning rate and
gradient norm, the comparison with the baselines (from 'weft eval'), the
scores by frequency band and at long-range positions, a stretch of held-out
text shaded by the bits each token cost, samples, and the run's facts. Each
figure is saved beside it as SVG and PNG. 'weft train' rewrites the page at
every validation; this command adds the parts that need the model.

The stretch shown is the block of about 2,000 characters of the held-out
split whose bits per character is the median of all blocks; --stretch N
shows block N instead.

--compare DIR... puts several runs on one page (--out, default
runs-compared.html): their validation curves on shared axes and one table,
best first.`,
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Dirs = args
			switch {
			case opts.Compare && opts.Run != "":
				return usagef("give --run DIR or --compare DIR..., not both")
			case opts.Compare && len(args) == 0:
				return usagef("--compare takes the run directories as arguments: weft report --compare DIR...")
			case !opts.Compare && opts.Run == "":
				return usagef("give --run DIR or --compare DIR...")
			case !opts.Compare && len(args) > 0:
				return usagef("%s takes no arguments with --run, got %d (to put several runs on one page, use --compare DIR...)", cmd.CommandPath(), len(args))
			case opts.Stretch < 0:
				return usagef("--stretch must be a block number from 1, got %d", opts.Stretch)
			}
			if runF != nil {
				return runF(opts)
			}
			return runReport(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory to report on")
	f.BoolVar(&opts.Compare, "compare", false, "put the run directories given as arguments on one page")
	f.StringVar(&opts.Page, "out", "runs-compared.html", "page to write with --compare")
	f.IntVar(&opts.Stretch, "stretch", 0, "block of held-out text for the surprisal view, from 1 (default: the median block)")
	return cmd
}

func runReport(opts *reportOptions) error {
	if opts.Compare {
		var ds []*report.Data
		for _, dir := range opts.Dirs {
			d, err := report.Gather(dir)
			if err != nil {
				return err
			}
			ds = append(ds, d)
		}
		if err := report.WriteCompare(opts.Page, ds, opts.Now()); err != nil {
			return err
		}
		fmt.Fprintf(opts.Out, "report: %s\n", opts.Page)
		return nil
	}
	path, err := writeRunReport(opts.cmdContext, opts.Run, opts.Stretch)
	if err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "report: %s\n", path)
	return nil
}

// writeRunReport writes the report of the run directory dir with
// everything it can show and returns the page's path. A run that another
// process is training gets the page of its files alone.
func writeRunReport(cc cmdContext, dir string, stretch int) (string, error) {
	r, err := runs.ReadRunFile(dir, nil)
	if err != nil {
		return "", err
	}
	rd, err := runs.Open(dir)
	if errors.Is(err, runs.ErrLocked) {
		d, err := report.Gather(dir)
		if err != nil {
			return "", err
		}
		return report.PagePath(dir), report.Write(dir, d)
	}
	if err != nil {
		return "", err
	}
	defer rd.Close()
	o := report.Options{Stretch: stretch, Held: true, HeldOutTokens: r.Evaluation.HeldOutTokens}
	ents, _ := checkpoint.List(rd.Checkpoints())
	if _, err := os.Stat(checkpoint.BestPath(rd.Checkpoints())); len(ents) > 0 || err == nil {
		m, err := runs.OpenModel(dir, "best")
		if err != nil {
			return "", err
		}
		ds, err := prepareData(cc, r, rd)
		if err != nil {
			return "", err
		}
		if m.Vocab.Len() != ds.Vocab.Len() {
			return "", fmt.Errorf("checkpoint %s: vocabulary of %d entries, the run's corpus has %d", m.Path, m.Vocab.Len(), ds.Vocab.Len())
		}
		o.Model, o.Data = m, ds
		if l, err := eval.LoadLadder(rd.Baselines(), r.Evaluation.Config); err == nil {
			o.Baselines = l
		}
	}
	d, err := report.Build(cc.ctx, dir, o)
	if err != nil {
		if stretch != 0 {
			return "", usagef("%v", err)
		}
		return "", err
	}
	return report.PagePath(dir), report.Write(dir, d)
}
