package main

import (
	"fmt"
	"io"
	"math"
	"text/tabwriter"
	"time"

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
	start := opts.Now()
	ds, err := prepareData(opts.cmdContext, r, rd)
	if err != nil {
		return err
	}
	speed := newPrepareSpeed(ds, opts.Now().Sub(start))
	if rd != nil {
		// The run file too, so that 'weft baselines DIR' and 'weft eval
		// --run DIR' find the run.
		if _, err := rd.WriteRunFile(r); err != nil {
			return err
		}
	}
	if opts.JSON {
		return writeJSON(opts.Out, prepareJSON{ds.Report, speed})
	}
	printSplitReport(opts.Out, ds)
	speed.print(opts.Out)
	if rd != nil {
		fmt.Fprintf(opts.Out, "saved in %s: %s, %s, %s, %s\n", rd.Path(), runs.RunFile, data.VocabFile, runs.SplitFile, data.TokenCacheFile)
	}
	return nil
}

// prepareJSON is what prepare --json prints: the split report's fields,
// and how long preparing took.
type prepareJSON struct {
	data.Report
	Speed prepareSpeed `json:"speed"`
}

// prepareSpeed is how fast prepare went: the wall time of reading,
// tokenizing, splitting and writing the cache (or of reading the cache
// back when it was reused), and from it the input read and the tokens made
// per second. The rates are null when the cache was reused, since nothing
// was tokenized.
type prepareSpeed struct {
	Seconds         float64  `json:"seconds"`
	CacheReused     bool     `json:"cache_reused"`
	InputBytes      int64    `json:"input_bytes"`
	Tokens          int64    `json:"tokens"`
	MBPerSecond     *float64 `json:"input_mb_per_second"` // 10^6 bytes of input per second
	TokensPerSecond *float64 `json:"tokens_per_second"`
}

func newPrepareSpeed(ds *data.Dataset, d time.Duration) prepareSpeed {
	s := prepareSpeed{
		Seconds:     d.Seconds(),
		CacheReused: ds.Cache.Hit,
		InputBytes:  ds.Input.Bytes,
		Tokens:      ds.Report.Train.Tokens + ds.Report.Validation.Tokens + ds.Report.Test.Tokens,
	}
	if !s.CacheReused && d > 0 {
		mb := float64(s.InputBytes) / 1e6 / d.Seconds()
		tps := float64(s.Tokens) / d.Seconds()
		s.MBPerSecond, s.TokensPerSecond = &mb, &tps
	}
	return s
}

func (s prepareSpeed) print(w io.Writer) {
	if s.MBPerSecond == nil {
		fmt.Fprintf(w, "token cache read back in %.1f s\n", s.Seconds)
		return
	}
	fmt.Fprintf(w, "prepared in %.1f s: %.1f MB of input a second, %s tokens a second\n",
		s.Seconds, *s.MBPerSecond, thousands(int64(math.Round(*s.TokensPerSecond))))
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
		fmt.Fprintln(w, runs.DamagedCache(ds.Cache.Damaged))
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
