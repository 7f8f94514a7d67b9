package rnn

import (
	"context"
	"fmt"
	"testing"
	"time"

	"weft/rnn/linalg"
)

// BenchmarkScoreVsTrain measures, side by side for the reference character
// shape (the reference 1×256 LSTM, V=96, E=64), tokens per second of a
// training window (B=32, T=64, forward and backward), of scoring lines one
// at a time (LogProbs, a batch of one) and of scoring them 64 at a time
// (LogProbsBatch), on one thread and on two. The lines are 256 random
// sequences of 20 to 139 tokens, the length of log lines. Compare the
// tokens/s metrics of one run: the ratio score-batch/train is the one the
// README states. The variant "alternating" runs, in each iteration, eight
// training windows and then the 256 lines 64 at a time, timing each part,
// and reports both speeds and their ratio: on a shared machine the two
// then meet the same load, which the in-place repetitions of the other
// variants do not.
func BenchmarkScoreVsTrain(b *testing.B) {
	s := benchShapes[0]
	lines := make([][]int, 256)
	total := 0
	for i := range lines {
		lines[i] = randomTokens(20+(i*37)%120, s.V, uint64(i+1))
		total += len(lines[i])
	}
	for _, threads := range []int{1, 2} {
		for _, variant := range []string{"train", "score-one", "score-batch", "alternating"} {
			b.Run(fmt.Sprintf("cell=lstm/V=%d/H=%d/threads=%d/%s", s.V, s.H, threads, variant), func(b *testing.B) {
				pool := linalg.NewPool(threads)
				defer pool.Close()
				tr, win := newBenchTrainer(b, "lstm", s, "sgd", pool)
				m := tr.m
				m.SetPool(pool)
				ctx := context.Background()
				dst := make([][]float64, len(lines))
				for i := range lines {
					dst[i] = make([]float64, len(lines[i]))
				}
				bs := m.NewBatchScorer(BatchStreams)
				tokens := 0
				var trainTime, scoreTime time.Duration
				trainTokens, scoreTokens := 0, 0
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					switch variant {
					case "alternating":
						t0 := time.Now()
						for range 8 {
							info, err := tr.Step(ctx, win)
							if err != nil {
								b.Fatal(err)
							}
							benchSink += info.Loss
							trainTokens += s.B * s.T
						}
						t1 := time.Now()
						if err := bs.LogProbs(ctx, dst, lines, nil); err != nil {
							b.Fatal(err)
						}
						benchSink += dst[0][1]
						scoreTokens += total
						trainTime, scoreTime = trainTime+t1.Sub(t0), scoreTime+time.Since(t1)
					case "train":
						info, err := tr.Step(ctx, win)
						if err != nil {
							b.Fatal(err)
						}
						benchSink += info.Loss
						tokens += s.B * s.T
					case "score-one":
						for k, l := range lines {
							if err := m.LogProbs(ctx, dst[k], l); err != nil {
								b.Fatal(err)
							}
						}
						benchSink += dst[0][1]
						tokens += total
					default:
						if err := bs.LogProbs(ctx, dst, lines, nil); err != nil {
							b.Fatal(err)
						}
						benchSink += dst[0][1]
						tokens += total
					}
				}
				if variant == "alternating" {
					tr, sc := float64(trainTokens)/trainTime.Seconds(), float64(scoreTokens)/scoreTime.Seconds()
					b.ReportMetric(tr, "train-tokens/s")
					b.ReportMetric(sc, "score-tokens/s")
					b.ReportMetric(sc/tr, "score/train")
					return
				}
				b.ReportMetric(float64(tokens)/b.Elapsed().Seconds(), "tokens/s")
			})
		}
	}
}
