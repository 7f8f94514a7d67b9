package main

import (
	"encoding/json"
	"fmt"
	"io"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
)

type prepareOptions struct {
	cmdContext
	Config string
	Run    string
	Set    []string
	JSON   bool
}

func newPrepareCmd(d *deps, runF func(*prepareOptions) error) *cobra.Command {
	opts := &prepareOptions{}
	cmd := &cobra.Command{
		Use:     "prepare CONFIG",
		Example: "  weft prepare night.toml --run runs/night",
		Short:   "Tokenize, split and cache a corpus and print the split report",
		Long: `Read the corpus a run file names, learn the vocabulary on the training split,
encode the three splits and print their sizes, out-of-vocabulary rates and
how many test lines also occur verbatim in training (leakage, which flatters
every model). With --run DIR the encoded tokens, the vocabulary and the report
are saved there for 'weft train' to reuse.`,
		Args: exactArgs(1, "one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Config = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runPrepare(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory to save the prepared corpus in")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the report as JSON")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

func runPrepare(opts *prepareOptions) error {
	r, err := configs.Load(opts.Config, opts.Set)
	if err != nil {
		return err
	}
	var rd *runs.Dir
	if opts.Run != "" {
		if rd, err = openRunDir(opts.Run); err != nil {
			return err
		}
		defer rd.Close()
	}
	ds, err := prepareData(opts.cmdContext, r, rd)
	if err != nil {
		return err
	}
	if rd != nil {
		// The run file too, so that 'weft baselines DIR' and 'weft eval
		// --run DIR' find the run.
		if _, err := rd.WriteRunFile(r); err != nil {
			return err
		}
	}
	if opts.JSON {
		enc := json.NewEncoder(opts.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(ds.Report)
	}
	printSplitReport(opts.Out, ds)
	if rd != nil {
		fmt.Fprintf(opts.Out, "saved in %s: %s, %s, %s, %s\n", rd.Path(), runs.RunFile, data.VocabFile, runs.SplitFile, data.TokenCacheFile)
	}
	return nil
}

func printSplitReport(w io.Writer, ds *data.Dataset) {
	in := ds.Input
	fmt.Fprintf(w, "corpus: %d files, %s bytes", in.Files, thousands(in.Bytes))
	if in.CRLF > 0 || in.BOM > 0 || in.Replaced > 0 {
		fmt.Fprintf(w, " (%s CRLF line ends normalised, %d byte-order marks stripped, %s invalid bytes replaced)",
			thousands(in.CRLF), in.BOM, thousands(in.Replaced))
	}
	fmt.Fprintln(w)
	if ds.Cache.Damaged != nil {
		fmt.Fprintf(w, "token cache was damaged and has been rebuilt: %v\n", ds.Cache.Damaged)
	} else if ds.Cache.Hit {
		fmt.Fprintln(w, "token cache: reused (inputs and settings unchanged)")
	}
	fmt.Fprintf(w, "vocabulary: %d entries (%s tokenizer, built on the training split)\n", ds.Report.VocabularySize, ds.Vocab.Kind())
	if s := ds.Report.BPESample; s != nil {
		fmt.Fprintf(w, "BPE merges learned on a sample: %s of %s training pieces (%.1f%%, seed %d; the corpus is over %d MiB)\n",
			thousands(s.Pieces), thousands(s.Of), 100*float64(s.Pieces)/float64(max(s.Of, 1)), s.Seed, data.BPESampleBytes>>20)
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "split\tcharacters\ttokens\tlines\tout of vocabulary\t")
	rows := []struct {
		name string
		s    data.SplitReport
	}{{"train", ds.Report.Train}, {"validation", ds.Report.Validation}, {"test", ds.Report.Test}}
	for _, row := range rows {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%.3f%%\t\n", row.name, thousands(row.s.Characters), thousands(row.s.Tokens), thousands(row.s.Lines), 100*row.s.OOVRate)
	}
	tw.Flush()
	fmt.Fprintf(w, "\ntest lines also found verbatim in training: %s of %s\n", thousands(ds.Report.LeakedTestLines), thousands(ds.Report.Test.Lines))
}
