package rnn

import (
	"context"
	"fmt"
	"runtime"
	"testing"

	"weft/rnn/linalg"
)

// benchSink keeps benchmark results alive.
var benchSink float64

// trainShape is one benchmark or memory-test shape.
type trainShape struct {
	name          string
	V, E, H, B, T int
}

var benchShapes = []trainShape{
	{"char", 96, 64, 256, 32, 64},     // the project's reference workload
	{"word", 10000, 256, 256, 32, 35}, // a word-level shape
}

// newBenchTrainer builds a 1-layer model of the given cell and shape with
// SGD (as in the project's reference workload) and a window of random tokens.
func newBenchTrainer(tb testing.TB, cell string, s trainShape, opt string, pool *linalg.Pool) (*Trainer[float32], Window) {
	cfg := DefaultConfig()
	cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize = cell, s.H, s.E
	tc := DefaultTrainConfig()
	tc.Optimizer, tc.LearningRate, tc.BatchSize, tc.UnrollSteps = opt, 0.1, s.B, s.T
	m, err := NewModel[float32](cfg, s.V, 1)
	if err != nil {
		tb.Fatal(err)
	}
	tr, err := NewTrainer(m, tc, pool)
	if err != nil {
		tb.Fatal(err)
	}
	toks := randomTokens(s.B*s.T+1, s.V, 2)
	return tr, Window{B: s.B, T: s.T, Inputs: toks[:s.B*s.T], Targets: toks[1:]}
}

// BenchmarkTrainWindow measures one training window (forward, backward,
// clipping and an SGD update) per cell at the reference and word shapes,
// on one thread and on two.
func BenchmarkTrainWindow(b *testing.B) {
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		for _, s := range benchShapes {
			for _, threads := range []int{1, 2} {
				name := fmt.Sprintf("cell=%s/shape=%s/V=%d/H=%d/B=%d/T=%d/threads=%d", cell, s.name, s.V, s.H, s.B, s.T, threads)
				b.Run(name, func(b *testing.B) {
					pool := linalg.NewPool(threads)
					defer pool.Close()
					tr, win := newBenchTrainer(b, cell, s, "sgd", pool)
					ctx := context.Background()
					if _, err := tr.Step(ctx, win); err != nil { // warm-up
						b.Fatal(err)
					}
					b.ReportAllocs()
					b.ResetTimer()
					for i := 0; i < b.N; i++ {
						info, err := tr.Step(ctx, win)
						if err != nil {
							b.Fatal(err)
						}
						benchSink += info.Loss
					}
					b.ReportMetric(float64(s.B*s.T)*float64(b.N)/b.Elapsed().Seconds(), "tokens/s")
				})
			}
		}
	}
}

// BenchmarkSampleStep measures one token of one-stream sampling.
func BenchmarkSampleStep(b *testing.B) {
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		b.Run("cell="+cell+"/V=96/H=256", func(b *testing.B) {
			cfg := DefaultConfig()
			cfg.Cell = cell
			m, _ := NewModel[float32](cfg, 96, 1)
			s := m.NewStream(1)
			lp := make([]float64, 96)
			tok := []int{3}
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				_ = s.Feed(tok)
				s.LogProbs(lp)
				benchSink += lp[0]
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "tokens/s")
		})
	}
}

// memoryFormula is the memory formula of the package documentation, in
// bytes: parameters and their gradients, optimizer state and the stored
// activations of one window (see doc.go).
func memoryFormula(tr *Trainer[float32]) int {
	n := 2 * tr.m.NumParams()
	for _, st := range tr.opt.StateTensors() {
		n += len(st.Value)
	}
	return 4 * (n + tr.w.floats())
}

// TestWindowMemory checks, at the reference shape, that building a model
// and its Adam trainer and running one window allocates at most 1.5 times
// the memory formula. Total allocation bounds the peak heap from above. The
// matrix kernels' packing workspace (about 2.3 MB whatever the shape, when
// this was written) is outside the formula; at smaller shapes it dominates.
func TestWindowMemory(t *testing.T) {
	s := benchShapes[0]
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		t.Run(cell, func(t *testing.T) {
			runtime.GC()
			var before, after runtime.MemStats
			runtime.ReadMemStats(&before)
			tr, win := newBenchTrainer(t, cell, s, "adam", nil)
			if _, err := tr.Step(context.Background(), win); err != nil {
				t.Fatal(err)
			}
			runtime.ReadMemStats(&after)
			got := after.TotalAlloc - before.TotalAlloc
			want := memoryFormula(tr)
			t.Logf("allocated %.2f MB, formula %.2f MB (ratio %.3f)", float64(got)/1e6, float64(want)/1e6, float64(got)/float64(want))
			if float64(got) > 1.5*float64(want) {
				t.Errorf("one window allocated %d bytes, more than 1.5 × the formula's %d", got, want)
			}
			if got < uint64(want) {
				t.Errorf("allocated %d bytes, less than the formula's %d: the formula counts buffers that do not exist", got, want)
			}
		})
	}
}

// BenchmarkWindowMemory reports, at the reference and word shapes, the
// bytes allocated to build an LSTM, its Adam trainer and run one window,
// beside the memory formula.
func BenchmarkWindowMemory(b *testing.B) {
	for _, s := range benchShapes {
		b.Run("cell=lstm/shape="+s.name, func(b *testing.B) {
			var got, want float64
			for i := 0; i < b.N; i++ {
				runtime.GC()
				var before, after runtime.MemStats
				runtime.ReadMemStats(&before)
				tr, win := newBenchTrainer(b, "lstm", s, "adam", nil)
				if _, err := tr.Step(context.Background(), win); err != nil {
					b.Fatal(err)
				}
				runtime.ReadMemStats(&after)
				got = float64(after.TotalAlloc - before.TotalAlloc)
				want = float64(memoryFormula(tr))
			}
			b.ReportMetric(got/1e6, "alloc-MB")
			b.ReportMetric(want/1e6, "formula-MB")
			benchSink += got
		})
	}
}

// BenchmarkLogProbs measures exact scoring (one stream) and the split form
// (8 streams, 64-token warm-up) of 4096 tokens with the reference LSTM.
func BenchmarkLogProbs(b *testing.B) {
	for _, sc := range []struct{ streams, warmup int }{{1, 0}, {8, 64}} {
		b.Run(fmt.Sprintf("cell=lstm/V=96/H=256/streams=%d/warmup=%d", sc.streams, sc.warmup), func(b *testing.B) {
			m, _ := NewModel[float32](DefaultConfig(), 96, 1)
			if err := m.SetScoring(sc.streams, sc.warmup); err != nil {
				b.Fatal(err)
			}
			seq := randomTokens(4096, 96, 3)
			dst := make([]float64, len(seq))
			ctx := context.Background()
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if err := m.LogProbs(ctx, dst, seq); err != nil {
					b.Fatal(err)
				}
				benchSink += dst[len(dst)-1]
			}
			b.ReportMetric(float64(len(seq))*float64(b.N)/b.Elapsed().Seconds(), "tokens/s")
		})
	}
}
