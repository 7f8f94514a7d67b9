package main

import (
	"fmt"
	"io"
	"math"
	"runtime"
	"strconv"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/rnn"
	"weft/rnn/bench"
)

type benchOptions struct {
	cmdContext
	Config  string // run file; "" means the defaults (the reference LSTM)
	Set     []string
	Vocab   int
	Windows int
	Warmup  int
	Threads int // -1: training.threads of the run file
	JSON    bool

	Sweep        bool  // --threads-sweep (bench_sweep.go)
	SweepThreads []int // --sweep-threads; implies Sweep

	Score    string // --score FILE: training against weft score side by side (bench_score.go)
	Rounds   int    // --rounds, with --score
	vocabSet bool   // --vocab was given
}

func newBenchCmd(d *deps, runF func(*benchOptions) error) *cobra.Command {
	opts := &benchOptions{}
	cmd := &cobra.Command{
		Use:     "bench [CONFIG] [--set key=value]... [--vocab N] [--windows N] [--threads N | --threads-sweep] [--score FILE [--rounds N]] [--json]",
		Example: "  bin/weft bench --threads-sweep\n  bin/weft bench --threads 1 --score app.log",
		Short:   "Measure training speed on synthetic tokens: tokens/s, GFLOP/s, time per phase, peak memory",
		Long: `Build the model a run file describes (without CONFIG, the defaults: a
1-layer LSTM with hidden_size 256, embedding_size 64, batch_size 32 and
unroll_steps 64), feed it synthetic tokens (uniform ids below --vocab, drawn
from training.seed), train --warmup windows that are not timed, then time
--windows windows of full training steps (forward, loss, backward, clipping,
optimizer update) in float32. The corpus of the run file is not read.

It prints tokens per second, GFLOP/s of the matrix products with the
formula used, the time split by phase (input projection, recurrence, gate
arithmetic, output layer with softmax, backward pass, update), the peak
resident memory of the process and the Go heap. --json prints the same as
one JSON object.

--threads-sweep runs the same measurement at 1, 2, 4, ... threads up to the
number of cores (or at the counts --sweep-threads lists) and prints tokens
per second at each with the speed-up over the first count, the fastest
setting, and the count training.threads = 0 would pick.

--score FILE sets training beside scoring on the same model and threads:
the model gets the vocabulary of FILE (learnt with the run file's data
settings) and trains on synthetic ids below it; each of --rounds rounds
times --windows training windows and one scoring of FILE line by line, as
'weft score --threads N FILE' scores it (the rows formatted and discarded),
the two in alternating order. It prints both speeds per round, the ratio
scoring tokens/s over training tokens/s, its median and range, and the
load average.`,
		Args: rangeArgs(0, 1, "at most one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if len(args) == 1 {
				opts.Config = args[0]
			}
			if !cmd.Flags().Changed("threads") {
				opts.Threads = -1
			}
			opts.vocabSet = cmd.Flags().Changed("vocab")
			if runF != nil {
				return runF(opts)
			}
			return runBench(opts)
		},
	}
	f := cmd.Flags()
	addSetFlag(cmd, &opts.Set)
	f.IntVar(&opts.Vocab, "vocab", 96, "vocabulary size of the synthetic tokens")
	f.IntVar(&opts.Windows, "windows", 20, "timed training windows")
	f.IntVar(&opts.Warmup, "warmup", 2, "untimed windows before them")
	f.IntVar(&opts.Threads, "threads", 0, "threads to compute with (default training.threads; 0: as many as the model's products pay for, as weft train chooses)")
	f.BoolVar(&opts.JSON, "json", false, "print the measurements as JSON")
	f.BoolVar(&opts.Sweep, "threads-sweep", false, "measure at 1, 2, 4, ... threads up to the core count")
	f.IntSliceVar(&opts.SweepThreads, "sweep-threads", nil, "thread counts for --threads-sweep, comma-separated (implies it)")
	f.StringVar(&opts.Score, "score", "", "also score this text file line by line as weft score does, in rounds alternating with the training windows, and print scoring tokens/s over training tokens/s")
	f.IntVar(&opts.Rounds, "rounds", 5, "rounds of training windows and scoring, with --score")
	return cmd
}

func runBench(opts *benchOptions) error {
	switch {
	case opts.Vocab < 1:
		return usagef("--vocab must be at least 1, got %d", opts.Vocab)
	case opts.Windows < 1:
		return usagef("--windows must be at least 1, got %d", opts.Windows)
	case opts.Warmup < 0:
		return usagef("--warmup must be 0 or more, got %d", opts.Warmup)
	case opts.Threads < -1:
		return usagef("--threads must be 0 (one per core) or more, got %d", opts.Threads)
	case opts.Rounds < 1:
		return usagef("--rounds must be at least 1, got %d", opts.Rounds)
	case opts.Score != "" && (opts.Sweep || len(opts.SweepThreads) > 0):
		return usagef("--score measures one thread count; give --threads N, not --threads-sweep")
	case opts.Score != "" && opts.vocabSet:
		return usagef("--vocab sizes the synthetic tokens; with --score the vocabulary is that of the scored file")
	}
	r, err := benchRun(opts.Config, opts.Set)
	if err != nil {
		return err
	}
	if opts.Sweep || len(opts.SweepThreads) > 0 {
		return runBenchSweep(opts, r)
	}
	if opts.Threads >= 0 {
		r.Training.Threads = opts.Threads
	}
	if r.Training.Threads == 0 { // as weft train chooses
		r.Training.Threads = rnn.ChooseThreads(r.Model, r.Training.BatchSize, runtime.NumCPU())
	}
	if opts.Score != "" {
		return runBenchScore(opts, r)
	}
	rep, err := measure(opts, r)
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSON(opts.Out, rep)
	}
	printBench(opts.Out, rep)
	return nil
}

// benchRun reads the run file, or the defaults with the overrides applied.
func benchRun(path string, sets []string) (*configs.Run, error) {
	if path != "" {
		return configs.Load(path, sets)
	}
	// The corpus is never read; data.files only has to be valid.
	return configs.Parse("--set", []byte("[data]\nfiles = [\"-\"]\n"), sets)
}

// measure trains the model of r on synthetic windows (rnn/bench) with
// the options' sizes, and adds the process's peak resident memory.
func measure(opts *benchOptions, r *configs.Run) (*bench.Report, error) {
	rep, err := bench.Train(opts.ctx, r.Model, r.Training.TrainConfig, bench.Options{Vocab: opts.Vocab, Warmup: opts.Warmup, Windows: opts.Windows})
	if err != nil {
		return nil, err
	}
	if rss, ok := peakRSS(); ok {
		rep.PeakRSSBytes = rss
	}
	return rep, nil
}

func printBench(w io.Writer, r *bench.Report) {
	m := r.Model
	shape := fmt.Sprintf("%s %d×%d", m.Cell, m.Layers, m.Hidden)
	if m.Projection > 0 {
		shape += fmt.Sprintf(", projection %d", m.Projection)
	}
	if m.Output == "class" {
		shape += fmt.Sprintf(", class output layer of %d classes", m.Classes)
	}
	fmt.Fprintf(w, "model     %s, vocabulary %d, embedding %d, %s parameters, %s, %s\n",
		shape, m.Vocab, m.Embedding, thousands(int64(m.Parameters)), m.Optimizer, m.DType)
	fmt.Fprintf(w, "windows   %d of %d streams × %d steps after %d untimed, %d thread(s)\n",
		r.Windows, m.Batch, m.Unroll, r.WarmupWindows, m.Threads)
	fmt.Fprintf(w, "speed     %s tokens/s (%s tokens in %.3f s; median window %.1f ms)\n",
		thousands(int64(r.TokensPerSecond+0.5)), thousands(r.Tokens), r.Seconds, 1000*r.WindowSecondsMedian)
	fmt.Fprintf(w, "compute   %.1f GFLOP/s of matrix products\n", r.GFLOPsPerSecond)
	fmt.Fprintf(w, "          %s\n", r.FLOPFormula)
	fmt.Fprintf(w, "          (multiply-adds × 2, for each forward product and the two backward products of its size;\n")
	fmt.Fprintf(w, "          gate arithmetic, softmax and the embedding gather not counted)\n")
	fmt.Fprintf(w, "loss      %.4f nats per token on the last window\n", r.FinalLoss)
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "phase\tseconds\tshare\tms/window\t")
	var sum float64
	for p := range rnn.NumPhases {
		s := r.PhaseSeconds[p.String()]
		sum += s
		fmt.Fprintf(tw, "%s\t%.3f\t%.1f%%\t%.2f\t\n", p, s, 100*s/r.Seconds, 1000*s/float64(r.Windows))
	}
	other := max(r.Seconds-sum, 0)
	fmt.Fprintf(tw, "other\t%.3f\t%.1f%%\t%.2f\t\n", other, 100*other/r.Seconds, 1000*other/float64(r.Windows))
	tw.Flush()
	fmt.Fprintln(w)
	rss := "unknown on this system"
	if r.PeakRSSBytes > 0 {
		rss = megabytes(uint64(r.PeakRSSBytes))
	}
	fmt.Fprintf(w, "memory    peak resident %s; Go heap %s in use of %s obtained\n",
		rss, megabytes(r.HeapInUseBytes), megabytes(r.HeapSysBytes))
	fmt.Fprintf(w, "          allocated per timed window: %s bytes in %s allocations (mean over the timed windows)\n",
		thousands(int64(math.Round(r.AllocBytesPerWindow))), strconv.FormatFloat(r.AllocsPerWindow, 'f', -1, 64))
}

func megabytes(b uint64) string { return fmt.Sprintf("%.1f MB", float64(b)/1e6) }
