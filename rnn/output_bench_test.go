package rnn

import (
	"context"
	"fmt"
	"math/rand/v2"
	"sort"
	"testing"
	"time"
)

// zipfTokens draws n ids from P(i) ∝ 1/(i+1) over V ids (Zipf's law with
// exponent 1, the usual model of word frequencies: common practice), so
// that the class layer sees targets spread over its classes as in text,
// and returns them with their counts.
func zipfTokens(n, V int, seed uint64) ([]int, []int64) {
	cum := make([]float64, V)
	var s float64
	for i := range cum {
		s += 1 / float64(i+1)
		cum[i] = s
	}
	rng := rand.New(rand.NewPCG(seed, 3))
	toks := make([]int, n)
	counts := make([]int64, V)
	for i := range toks {
		id := sort.SearchFloat64s(cum, rng.Float64()*s)
		toks[i] = min(id, V-1)
		counts[toks[i]]++
	}
	return toks, counts
}

// BenchmarkOutputLayer compares training windows of the full softmax and
// of the class layer (C = round(√V)) on a 1-layer GRU word model (E = H =
// 256, B = 32, T = 35, SGD, one thread) at V = 10,000 and 50,000, Zipf
// tokens. Each iteration runs one window of each model, alternating, so the
// two figures share the machine's state; it reports both in tokens per
// second and their ratio as speedup.
func BenchmarkOutputLayer(b *testing.B) {
	const E, H, B, T = 256, 256, 32, 35
	for _, V := range []int{10000, 50000} {
		b.Run(fmt.Sprintf("vocab=%d", V), func(b *testing.B) {
			toks, counts := zipfTokens(B*T+1, V, 2)
			win := Window{B: B, T: T, Inputs: toks[:B*T], Targets: toks[1:]}
			var trs [2]*Trainer[float32]
			for i, layer := range []string{"full", "class"} {
				cfg := DefaultConfig()
				cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize, cfg.OutputLayer = "gru", H, E, layer
				m, err := NewModelWithCounts[float32](cfg, counts, 1)
				if err != nil {
					b.Fatal(err)
				}
				tc := DefaultTrainConfig()
				tc.Optimizer, tc.LearningRate, tc.BatchSize, tc.UnrollSteps = "sgd", 0.1, B, T
				if trs[i], err = NewTrainer(m, tc, nil); err != nil {
					b.Fatal(err)
				}
			}
			ctx := context.Background()
			for _, tr := range trs { // warm-up
				if _, err := tr.Step(ctx, win); err != nil {
					b.Fatal(err)
				}
			}
			var spent [2]time.Duration
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				for i, tr := range trs {
					t0 := time.Now()
					info, err := tr.Step(ctx, win)
					if err != nil {
						b.Fatal(err)
					}
					spent[i] += time.Since(t0)
					benchSink += info.Loss
				}
			}
			tokens := float64(b.N * B * T)
			b.ReportMetric(tokens/spent[0].Seconds(), "full-tok/s")
			b.ReportMetric(tokens/spent[1].Seconds(), "class-tok/s")
			b.ReportMetric(spent[0].Seconds()/spent[1].Seconds(), "speedup")
		})
	}
}
