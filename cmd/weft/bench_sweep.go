package main

import (
	"fmt"
	"io"
	"runtime"
	"slices"
	"text/tabwriter"

	"weft/configs"
	"weft/rnn/bench"
)

// runBenchSweep runs the measurement at every thread count of the sweep, in
// increasing order, each with a fresh model of the same seed and the same
// windows.
func runBenchSweep(opts *benchOptions, r *configs.Run) error {
	if opts.Threads >= 0 {
		return usagef("--threads and --threads-sweep exclude each other: the sweep sets the threads")
	}
	cores := runtime.NumCPU()
	counts := bench.SweepCounts(cores)
	if len(opts.SweepThreads) > 0 {
		counts = slices.Clone(opts.SweepThreads)
		for _, n := range counts {
			if n < 1 {
				return usagef("--sweep-threads must list counts of 1 or more, got %d", n)
			}
		}
	}
	sw, err := bench.ThreadSweep(opts.ctx, r.Model, r.Training.TrainConfig, bench.Options{Vocab: opts.Vocab, Warmup: opts.Warmup, Windows: opts.Windows}, counts, cores)
	if err != nil {
		return err
	}
	if rss, ok := peakRSS(); ok {
		for _, p := range sw.Points {
			p.Report.PeakRSSBytes = rss // the process's peak so far: the largest count's at the latest
		}
	}
	if opts.JSON {
		return writeJSON(opts.Out, sw)
	}
	printBenchSweep(opts.Out, sw)
	return nil
}

func printBenchSweep(w io.Writer, sw *bench.Sweep) {
	m := sw.Points[0].Report.Model
	shape := fmt.Sprintf("%s %d×%d", m.Cell, m.Layers, m.Hidden)
	if m.Projection > 0 {
		shape += fmt.Sprintf(", projection %d", m.Projection)
	}
	if m.Output == "class" {
		shape += fmt.Sprintf(", class output layer of %d classes", m.Classes)
	}
	r0 := sw.Points[0].Report
	fmt.Fprintf(w, "model     %s, vocabulary %d, embedding %d, %s parameters, %s, %s\n",
		shape, m.Vocab, m.Embedding, thousands(int64(m.Parameters)), m.Optimizer, m.DType)
	fmt.Fprintf(w, "windows   %d of %d streams × %d steps after %d untimed, at each thread count; %d cores\n",
		r0.Windows, m.Batch, m.Unroll, r0.WarmupWindows, sw.Cores)
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "threads\ttokens/s\tspeed-up\tGFLOP/s\tms/window\t\n")
	for _, p := range sw.Points {
		mark := ""
		if p.Threads == sw.FastestThreads {
			mark = " fastest"
		}
		fmt.Fprintf(tw, "%d\t%s\t%.2f×\t%.1f\t%.2f\t%s\n", p.Threads, thousands(int64(p.TokensPerSecond+0.5)),
			p.SpeedUp, p.Report.GFLOPsPerSecond, 1000*p.Report.WindowSecondsMedian, mark)
	}
	tw.Flush()
	fmt.Fprintln(w)
	fmt.Fprintf(w, "speed-up  over %d thread(s); ms/window is the median window\n", sw.BaseThreads)
	fmt.Fprintf(w, "default   training.threads = 0 takes %d thread(s) for this model on %d cores\n", sw.DefaultThreads, sw.Cores)
	if len(sw.Points) > 1 {
		fmt.Fprintf(w, "          (one run per count: repeat the sweep before trusting differences of a few percent)\n")
	}
}
