// Package bench measures how fast a model trains on this machine: the
// model a run file describes, trained on seeded synthetic tokens and timed
// window by window (tokens per second, time per phase, allocations), the
// floating-point count of its matrix products, and the same measurement
// at several thread counts. It reads no corpus. weft bench prints what it
// measures; weft config new --fit times the sizing rule's reference model
// with it.
package bench

import (
	"context"
	"fmt"
	"math/rand/v2"
	"runtime"
	"slices"
	"strings"
	"time"

	"weft/eval"
	"weft/rnn"
	"weft/rnn/linalg"
)

// Options is what to time: Warmup untimed windows, then Windows timed
// ones, over uniform token ids below Vocab.
type Options struct {
	Vocab   int
	Warmup  int
	Windows int
}

// Shape is the resolved model and window shape of a measurement.
type Shape struct {
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

// NewShape describes net, built from mc over vocab entries, trained by tc
// in windows of batch streams × unroll steps on threads threads.
func NewShape(net *rnn.Model[float32], mc rnn.Config, tc rnn.TrainConfig, vocab, batch, unroll, threads int) Shape {
	sh := Shape{
		Cell: net.Cell().Name(), Layers: mc.Layers, Vocab: vocab,
		Embedding: mc.EmbeddingSize, Hidden: mc.HiddenSize, Projection: mc.ProjectionSize,
		Batch: batch, Unroll: unroll, Threads: threads, Optimizer: tc.Optimizer, DType: "float32",
		Parameters: net.NumParams(), Output: "full",
	}
	if cs := net.OutputClasses(); cs != nil {
		sh.Output, sh.Classes = "class", len(cs)-1
	}
	return sh
}

// Report is what Train measured; its JSON form is weft bench --json.
type Report struct {
	Model               Shape              `json:"model"`
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
	PeakRSSBytes        int64              `json:"peak_rss_bytes"` // the caller's to fill; 0 where the system does not say
	HeapInUseBytes      uint64             `json:"heap_in_use_bytes"`
	HeapSysBytes        uint64             `json:"heap_sys_bytes"`
	AllocBytesPerWindow float64            `json:"alloc_bytes_per_window"`
	AllocsPerWindow     float64            `json:"allocs_per_window"`
}

// stream is the PCG stream constant of the synthetic tokens.
const stream = 0x77656674_62656e63 // "weftbenc"

// Train builds the model mc describes over o.Vocab entries, trains it as
// tc says (tc.Threads threads; the seed of the weights and the tokens is
// tc.Seed) on synthetic windows, and times the o.Windows after the
// o.Warmup untimed ones.
func Train(ctx context.Context, mc rnn.Config, tc rnn.TrainConfig, o Options) (*Report, error) {
	switch {
	case o.Vocab < 1:
		return nil, fmt.Errorf("vocabulary must have at least 1 entry, got %d", o.Vocab)
	case o.Windows < 1:
		return nil, fmt.Errorf("at least 1 timed window, got %d", o.Windows)
	case o.Warmup < 0:
		return nil, fmt.Errorf("untimed windows must be 0 or more, got %d", o.Warmup)
	}
	net, err := rnn.NewModel[float32](mc, o.Vocab, tc.Seed)
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
	wins := Windows(o.Vocab, B, T, o.Warmup+o.Windows, tc.Seed)

	var pt rnn.PhaseTimes
	tr.SetPhaseTimes(&pt)
	var last rnn.StepInfo
	for _, w := range wins[:o.Warmup] {
		if last, err = tr.Step(ctx, w); err != nil {
			return nil, err
		}
	}
	pt = rnn.PhaseTimes{}
	times := make([]time.Duration, o.Windows)
	var tokens int64
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	for i, w := range wins[o.Warmup:] {
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
	flop, formula := FLOPs(mc, o.Vocab, net.OutputClasses())
	positions := Positions(tc, o.Warmup, o.Windows)
	sec := total.Seconds()
	rep := &Report{
		Model:               NewShape(net, mc, tc, o.Vocab, B, U, pool.Threads()),
		WarmupWindows:       o.Warmup,
		Windows:             o.Windows,
		Tokens:              tokens,
		Seconds:             sec,
		WindowSecondsMedian: Median(times).Seconds(),
		TokensPerSecond:     float64(tokens) / sec,
		FLOPPerToken:        flop,
		FLOPFormula:         formula,
		GFLOPsPerSecond:     flop * float64(positions) / sec / 1e9,
		PhaseSeconds:        map[string]float64{},
		FinalLoss:           last.Loss,
		HeapInUseBytes:      after.HeapInuse,
		HeapSysBytes:        after.HeapSys,
		AllocBytesPerWindow: float64(after.TotalAlloc-before.TotalAlloc) / float64(o.Windows),
		AllocsPerWindow:     float64(after.Mallocs-before.Mallocs) / float64(o.Windows),
	}
	for p := range rnn.NumPhases {
		rep.PhaseSeconds[p.String()] = pt[p].Seconds()
	}
	return rep, nil
}

// Windows returns n consecutive windows of B streams and T steps over
// uniform token ids below V, drawn from seed: each stream is one
// sequence, so the target of a window's last step is the first input of
// the next window.
func Windows(V, B, T, n int, seed uint64) []rnn.Window {
	rng := rand.New(rand.NewPCG(seed, stream))
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

// FLOPs is the floating-point operations of the matrix products per
// position of a window (rnn.Config.MatMulCost, which states the count),
// and the formula with the numbers put in. For the class layer, with class
// boundaries start, n̄ is the mean class size of a uniformly drawn target:
// the synthetic tokens are uniform.
func FLOPs(mc rnn.Config, V int, start []int) (float64, string) {
	flop, terms := mc.MatMulCost(V, start)
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
	return flop, fmt.Sprintf("6 × (%s) = 6 × (%s) = %s FLOP per token, G = %d·H%s",
		strings.Join(names, " + "), strings.Join(nums, " + "), eval.Thousands(int64(flop+0.5)), mc.Gates(), note)
}

// Positions is the number of positions the timed windows run through the
// model: B·T each, and with BPTT(h; h′) replay the replayed steps too.
func Positions(tc rnn.TrainConfig, warmup, windows int) int64 {
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

// Median is the middle of xs (the mean of the two middle ones for an even
// count); xs is left as it is.
func Median[T ~int64 | ~float64](xs []T) T {
	s := slices.Clone(xs)
	slices.Sort(s)
	m := len(s) / 2
	if len(s)%2 == 1 {
		return s[m]
	}
	return (s[m-1] + s[m]) / 2
}
