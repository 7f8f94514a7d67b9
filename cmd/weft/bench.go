package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/rnn"
	"weft/rnn/linalg"
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

// benchShape is the resolved model and window shape of a bench run.
type benchShape struct {
	Cell       string `json:"cell"`
	Layers     int    `json:"layers"`
	Vocab      int    `json:"vocab"`
	Embedding  int    `json:"embedding"`
	Hidden     int    `json:"hidden"`
	Projection int    `json:"projection"`
	Output     string `json:"output_layer"`             // "full" or "class"
	Classes    int    `json:"output_classes,omitempty"` // classes of the "class" layer
	Batch      int    `json:"batch"`
	Unroll     int    `json:"unroll"`
	Threads    int    `json:"threads"`
	Optimizer  string `json:"optimizer"`
	DType      string `json:"dtype"`
	Parameters int    `json:"parameters"`
}

// newBenchShape describes net as r configures it, over vocab entries, in
// windows of batch streams × unroll steps on threads threads.
func newBenchShape(net *rnn.Model[float32], r *configs.Run, vocab, batch, unroll, threads int) benchShape {
	sh := benchShape{
		Cell: net.Cell().Name(), Layers: r.Model.Layers, Vocab: vocab,
		Embedding: r.Model.EmbeddingSize, Hidden: r.Model.HiddenSize, Projection: r.Model.ProjectionSize,
		Batch: batch, Unroll: unroll, Threads: threads, Optimizer: r.Training.Optimizer, DType: "float32",
		Parameters: net.NumParams(), Output: "full",
	}
	if cs := net.OutputClasses(); cs != nil {
		sh.Output, sh.Classes = "class", len(cs)-1
	}
	return sh
}

// benchReport is what bench measured; its JSON form is for scripts.
type benchReport struct {
	Model               benchShape         `json:"model"`
	WarmupWindows       int                `json:"warmup_windows"`
	Windows             int                `json:"windows"`
	Tokens              int64              `json:"tokens"` // positions that added to the loss in the timed windows
	Seconds             float64            `json:"seconds"`
	WindowSecondsMedian float64            `json:"window_seconds_median"`
	TokensPerSecond     float64            `json:"tokens_per_second"`
	FLOPPerToken        float64            `json:"flop_per_token"`
	FLOPFormula         string             `json:"flop_formula"`
	GFLOPsPerSecond     float64            `json:"gflops_per_second"`
	PhaseSeconds        map[string]float64 `json:"phase_seconds"`
	FinalLoss           float64            `json:"final_loss_nats"`
	PeakRSSBytes        int64              `json:"peak_rss_bytes"` // 0 where the system does not say
	HeapInUseBytes      uint64             `json:"heap_in_use_bytes"`
	HeapSysBytes        uint64             `json:"heap_sys_bytes"`
	AllocBytesPerWindow float64            `json:"alloc_bytes_per_window"`
	AllocsPerWindow     float64            `json:"allocs_per_window"`
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
	rep, err := bench(opts, r)
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSON(opts.Out, rep)
	}
	printBench(opts.Out, rep)
	return nil
}

// referenceSpeed times the sizing rule's reference model (the defaults:
// lstm 1×256, embedding 64, over 84 synthetic entries) on threads threads,
// as weft bench does: 3 untimed windows, then 30 timed ones (about a
// second on one core of a current machine).
func referenceSpeed(ctx context.Context, threads int) (float64, error) {
	r, err := benchRun("", nil)
	if err != nil {
		return 0, err
	}
	r.Training.Threads = threads
	rep, err := bench(&benchOptions{cmdContext: cmdContext{ctx: ctx}, Vocab: 84, Warmup: 3, Windows: 30}, r)
	if err != nil {
		return 0, err
	}
	return rep.TokensPerSecond, nil
}

// benchRun reads the run file, or the defaults with the overrides applied.
func benchRun(path string, sets []string) (*configs.Run, error) {
	if path != "" {
		return configs.Load(path, sets)
	}
	// The corpus is never read; data.files only has to be valid.
	return configs.Parse("--set", []byte("[data]\nfiles = [\"-\"]\n"), sets)
}

// benchStream is the PCG stream constant of the synthetic tokens.
const benchStream = 0x77656674_62656e63 // "weftbenc"

// bench builds the model of r and trains it on synthetic windows.
func bench(opts *benchOptions, r *configs.Run) (*benchReport, error) {
	tc := r.Training.TrainConfig
	net, err := rnn.NewModel[float32](r.Model, opts.Vocab, tc.Seed)
	if err != nil {
		return nil, err
	}
	pool := linalg.NewPool(tc.Threads)
	defer pool.Close()
	net.SetPool(pool)
	tr, err := rnn.NewTrainer(net, tc, pool)
	if err != nil {
		return nil, err
	}
	B, U := tc.BatchSize, tc.UnrollSteps
	T := U
	if tc.BPTTAdvanceSteps > 0 {
		T = tc.BPTTAdvanceSteps
	}
	n := opts.Warmup + opts.Windows
	wins := synthWindows(opts.Vocab, B, T, n, tc.Seed)

	var pt rnn.PhaseTimes
	tr.SetPhaseTimes(&pt)
	ctx := opts.ctx
	var last rnn.StepInfo
	for _, w := range wins[:opts.Warmup] {
		if last, err = tr.Step(ctx, w); err != nil {
			return nil, err
		}
	}
	pt = rnn.PhaseTimes{}
	times := make([]time.Duration, opts.Windows)
	var tokens int64
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	for i, w := range wins[opts.Warmup:] {
		t0 := time.Now()
		last, err = tr.Step(ctx, w)
		times[i] = time.Since(t0)
		if err != nil {
			return nil, err
		}
		tokens += int64(last.Tokens)
	}
	runtime.ReadMemStats(&after)

	var total time.Duration
	for _, d := range times {
		total += d
	}
	flop, formula := benchFLOPs(r, opts.Vocab, net.OutputClasses())
	positions := benchPositions(tc, opts.Warmup, opts.Windows)
	sec := total.Seconds()
	rep := &benchReport{
		Model:               newBenchShape(net, r, opts.Vocab, B, U, pool.Threads()),
		WarmupWindows:       opts.Warmup,
		Windows:             opts.Windows,
		Tokens:              tokens,
		Seconds:             sec,
		WindowSecondsMedian: median(times).Seconds(),
		TokensPerSecond:     float64(tokens) / sec,
		FLOPPerToken:        flop,
		FLOPFormula:         formula,
		GFLOPsPerSecond:     flop * float64(positions) / sec / 1e9,
		PhaseSeconds:        map[string]float64{},
		FinalLoss:           last.Loss,
		HeapInUseBytes:      after.HeapInuse,
		HeapSysBytes:        after.HeapSys,
		AllocBytesPerWindow: float64(after.TotalAlloc-before.TotalAlloc) / float64(opts.Windows),
		AllocsPerWindow:     float64(after.Mallocs-before.Mallocs) / float64(opts.Windows),
	}
	for p := range rnn.NumPhases {
		rep.PhaseSeconds[p.String()] = pt[p].Seconds()
	}
	if rss, ok := peakRSS(); ok {
		rep.PeakRSSBytes = rss
	}
	return rep, nil
}

// synthWindows returns n consecutive windows of B streams and T steps over
// uniform token ids below V: each stream is one sequence, so the target of
// a window's last step is the first input of the next window.
func synthWindows(V, B, T, n int, seed uint64) []rnn.Window {
	rng := rand.New(rand.NewPCG(seed, benchStream))
	L := n*T + 1
	seq := make([]int, B*L) // stream b is seq[b*L : (b+1)*L]
	for i := range seq {
		seq[i] = rng.IntN(V)
	}
	wins := make([]rnn.Window, n)
	for k := range wins {
		in, tg := make([]int, T*B), make([]int, T*B)
		for t := 0; t < T; t++ {
			for b := 0; b < B; b++ {
				in[t*B+b] = seq[b*L+k*T+t]
				tg[t*B+b] = seq[b*L+k*T+t+1]
			}
		}
		wins[k] = rnn.Window{B: B, T: T, Inputs: in, Targets: tg}
	}
	return wins
}

// benchFLOPs is the floating-point operations of the matrix products per
// position of a window (rnn.Config.MatMulCost, which states the count),
// and the formula with the numbers put in. For the class layer, with class
// boundaries start, n̄ is the mean class size of a uniformly drawn target:
// the synthetic tokens are uniform.
func benchFLOPs(r *configs.Run, V int, start []int) (float64, string) {
	flop, terms := r.Model.MatMulCost(V, start)
	var names, nums []string
	for _, t := range terms {
		out := fmt.Sprint(int64(t.Out))
		if strings.Contains(t.Name, "n̄") {
			C := len(start) - 1
			out = fmt.Sprintf("(%d+%.4g)", C, t.Out-float64(C))
		}
		if t.Count > 1 {
			names = append(names, fmt.Sprintf("%d·%s", t.Count, t.Name))
			nums = append(nums, fmt.Sprintf("%d·%d·%s", t.Count, t.In, out))
		} else {
			names = append(names, t.Name)
			nums = append(nums, fmt.Sprintf("%d·%s", t.In, out))
		}
	}
	note := ""
	if start != nil {
		note = ", C classes, n̄ the mean size of a uniform target's class"
	}
	gates := r.Model.Gates()
	return flop, fmt.Sprintf("6 × (%s) = 6 × (%s) = %s FLOP per token, G = %d·H%s",
		strings.Join(names, " + "), strings.Join(nums, " + "), thousands(int64(flop+0.5)), gates, note)
}

// benchPositions is the number of positions the timed windows run through
// the model: B·T each, and with BPTT(h; h′) replay the replayed steps too.
func benchPositions(tc rnn.TrainConfig, warmup, windows int) int64 {
	B, U, a := tc.BatchSize, tc.UnrollSteps, tc.BPTTAdvanceSteps
	if a == 0 || a >= U {
		return int64(B) * int64(U) * int64(windows)
	}
	keep := U - a
	var n int64
	hist := 0
	for i := 0; i < warmup+windows; i++ {
		steps := hist + a
		if i >= warmup {
			n += int64(B) * int64(steps)
		}
		hist = min(keep, steps)
	}
	return n
}

// median is the middle of xs (the mean of the two middle ones for an even
// count); xs is left as it is.
func median[T ~int64 | ~float64](xs []T) T {
	s := slices.Clone(xs)
	slices.Sort(s)
	m := len(s) / 2
	if len(s)%2 == 1 {
		return s[m]
	}
	return (s[m-1] + s[m]) / 2
}

func printBench(w io.Writer, r *benchReport) {
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
