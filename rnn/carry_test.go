package rnn

import (
	"context"
	"testing"
)

// carryTol bounds the difference between two float64 evaluation orders of
// the same sums.
const carryTol = 1e-10

// TestCarriedStateMatchesWholeSequence checks the state handling of the
// trainer (carry across windows, per-stream Reset, the BPTT(h; h′) replay)
// against LogProbs over each stream's whole sequence, which carries the
// state exactly from the start: with a learning rate too small to change
// any float64 weight (1e-300), the loss a window reports must equal the
// summed −ln p of its new positions.
func TestCarriedStateMatchesWholeSequence(t *testing.T) {
	for _, tc := range []struct {
		name      string
		unroll, a int // unroll_steps, bptt_advance_steps
		varied    bool
	}{
		{"truncated", 5, 0, false},
		{"truncated/varied_T", 5, 0, true}, // windows of 1 to 5 steps
		{"bptt_advance_steps=3", 8, 3, false},
	} {
		for _, cell := range []string{"rnn", "gru", "lstm"} {
			t.Run(tc.name+"/"+cell, func(t *testing.T) {
				cfg := smallConfigs()[cell]
				cfg.Dropout = 0
				m, err := NewModel[float64](cfg, 12, 2)
				if err != nil {
					t.Fatal(err)
				}
				trc := DefaultTrainConfig()
				trc.Optimizer, trc.LearningRate, trc.BatchSize = "sgd", 1e-300, 2
				trc.UnrollSteps, trc.BPTTAdvanceSteps = tc.unroll, tc.a
				tr, err := NewTrainer(m, trc, nil)
				if err != nil {
					t.Fatal(err)
				}
				before := append([]float64(nil), m.values...)
				const B, windows = 2, 7
				lengths := make([]int, windows)
				total := 0
				for k := range lengths {
					lengths[k] = tc.unroll
					if tc.a > 0 {
						lengths[k] = tc.a
					}
					if tc.varied {
						lengths[k] = 1 + (3*k+1)%tc.unroll
					}
					total += lengths[k]
				}
				streams := [B][]int{randomTokens(total+1, 12, 21), randomTokens(total+1, 12, 22)}
				start := [B]int{} // where each stream's current document starts
				ctx := context.Background()
				pos := 0
				for k, T := range lengths {
					w := Window{B: B, T: T, Inputs: make([]int, B*T), Targets: make([]int, B*T)}
					if k == 3 { // stream 0 starts a new document here
						w.Reset = []bool{true, false}
						start[0] = pos
					}
					for s := 0; s < T; s++ {
						for b := 0; b < B; b++ {
							w.Inputs[s*B+b] = streams[b][pos+s]
							w.Targets[s*B+b] = streams[b][pos+s+1]
						}
					}
					pos += T
					info, err := tr.Step(ctx, w)
					if err != nil {
						t.Fatal(err)
					}
					var want float64
					for b := 0; b < B; b++ {
						doc := streams[b][start[b] : pos+1]
						lp := make([]float64, len(doc))
						if err := m.LogProbs(ctx, lp, doc); err != nil {
							t.Fatal(err)
						}
						for _, v := range lp[len(doc)-T:] {
							want -= v
						}
					}
					if got := info.Loss * float64(info.Tokens); info.Tokens != B*T || !closeTo(got, want, carryTol) {
						t.Errorf("window %d: loss·tokens %.15g over %d positions, whole-sequence −Σ ln p %.15g over %d", k, got, info.Tokens, want, B*T)
					}
				}
				// Zero parameters (biases) move by about 1e-300; nothing more.
				for i := range before {
					if d := m.values[i] - before[i]; d > 1e-290 || d < -1e-290 {
						t.Fatalf("the learning rate 1e-300 moved parameter %d by %g", i, d)
					}
				}
			})
		}
	}
}
