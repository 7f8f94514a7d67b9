package main

import (
	"fmt"
	"io"
	"runtime"
	"slices"
	"text/tabwriter"

	"weft/configs"
	"weft/rnn"
)

// benchSweepPoint is one thread count of a sweep.
type benchSweepPoint struct {
	Threads         int          `json:"threads"`
	TokensPerSecond float64      `json:"tokens_per_second"`
	SpeedUp         float64      `json:"speed_up"` // over the first count of the sweep
	Report          *benchReport `json:"report"`
}

// benchSweep is what --threads-sweep measured; its JSON form is for
// scripts.
type benchSweep struct {
	Cores          int               `json:"cores"`
	BaseThreads    int               `json:"base_threads"`    // the count speed-ups are relative to
	FastestThreads int               `json:"fastest_threads"` // the count with the most tokens/s
	DefaultThreads int               `json:"default_threads"` // what training.threads = 0 picks here (rnn.ChooseThreads)
	Points         []benchSweepPoint `json:"points"`
}

// sweepCounts is 1, 2, 4, ... up to cores, and cores itself when it is not
// a power of two.
func sweepCounts(cores int) []int {
	var ns []int
	for n := 1; n <= cores; n *= 2 {
		ns = append(ns, n)
	}
	if ns[len(ns)-1] != cores {
		ns = append(ns, cores)
	}
	return ns
}

// runBenchSweep runs bench at every thread count of the sweep, in
// increasing order, each with a fresh model of the same seed and the same
// windows.
func runBenchSweep(opts *benchOptions, r *configs.Run) error {
	if opts.Threads >= 0 {
		return usagef("--threads and --threads-sweep exclude each other: the sweep sets the threads")
	}
	cores := runtime.NumCPU()
	counts := sweepCounts(cores)
	if len(opts.SweepThreads) > 0 {
		counts = slices.Clone(opts.SweepThreads)
		for _, n := range counts {
			if n < 1 {
				return usagef("--sweep-threads must list counts of 1 or more, got %d", n)
			}
		}
	}
	sw := &benchSweep{
		Cores:          cores,
		BaseThreads:    counts[0],
		DefaultThreads: rnn.ChooseThreads(r.Model, r.Training.BatchSize, cores),
	}
	for _, n := range counts {
		run := *r
		run.Training.Threads = n
		rep, err := bench(opts, &run)
		if err != nil {
			return err
		}
		sw.Points = append(sw.Points, benchSweepPoint{Threads: n, TokensPerSecond: rep.TokensPerSecond, Report: rep})
	}
	best := 0
	for i := range sw.Points {
		p := &sw.Points[i]
		p.SpeedUp = p.TokensPerSecond / sw.Points[0].TokensPerSecond
		if p.TokensPerSecond > sw.Points[best].TokensPerSecond {
			best = i
		}
	}
	sw.FastestThreads = sw.Points[best].Threads
	if opts.JSON {
		return writeJSON(opts.Out, sw)
	}
	printBenchSweep(opts.Out, sw)
	return nil
}

func printBenchSweep(w io.Writer, sw *benchSweep) {
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
