package rnn

import (
	"context"
	"testing"

	"weft/rnn/linalg"
)

// TestCellThreadsBitIdentical trains every cell form for a few windows on
// 1, 2, 3, 16 and 64 threads at a shape where the cells' row loops (Pool.For over
// the B streams), the column sums and the packed recurrent products are
// all split between threads (as are the optimizer update and the gradient
// norm and clipping, issue 17), and checks that the parameters come out with
// the same bits (the determinism rule of DEVELOPERS.md: work is split over
// outputs, never over a reduction).
func TestCellThreadsBitIdentical(t *testing.T) {
	const H, E, B, T, V = 256, 32, 32, 4, 40
	forms := []struct{ cell, activation, gruForm string }{
		{"rnn", "tanh", ""}, {"rnn", "relu", ""},
		{"gru", "", "reset_after"}, {"gru", "", "reset_before"},
		{"lstm", "", ""},
	}
	// The smallest gate width is H (the vanilla cell, and the reset-before
	// GRU's second pass): its rows must form at least two ranges.
	if B <= rowGrainElems/H {
		t.Fatalf("B=%d rows of %d elements form one range (grain %d rows): the test would not split", B, H, rowGrainElems/H)
	}
	pools := []*linalg.Pool{linalg.NewPool(2), linalg.NewPool(3), linalg.NewPool(16), linalg.NewPool(64)}
	defer func() {
		for _, p := range pools {
			p.Close()
		}
	}()
	toks := randomTokens(B*T+1, V, 5)
	win := Window{B: B, T: T, Inputs: toks[:B*T], Targets: toks[1:]}
	for _, f := range forms {
		name := f.cell + "/" + f.activation + f.gruForm
		t.Run(name, func(t *testing.T) {
			run := func(p *linalg.Pool) []float32 {
				cfg := DefaultConfig()
				cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize, cfg.Layers, cfg.Dropout = f.cell, H, E, 2, 0.1
				if f.activation != "" {
					cfg.Activation = f.activation
				}
				if f.gruForm != "" {
					cfg.GRUForm = f.gruForm
				}
				tc := DefaultTrainConfig()
				tc.BatchSize, tc.UnrollSteps, tc.LearningRate = B, T, 0.05
				m, err := NewModel[float32](cfg, V, 7)
				if err != nil {
					t.Fatal(err)
				}
				tr, err := NewTrainer(m, tc, p)
				if err != nil {
					t.Fatal(err)
				}
				for i := 0; i < 2; i++ {
					if _, err := tr.Step(context.Background(), win); err != nil {
						t.Fatal(err)
					}
				}
				return append([]float32(nil), m.values...)
			}
			want := run(nil)
			for _, p := range pools {
				got := run(p)
				if k := sameBits(want, got); k >= 0 {
					t.Errorf("threads=%d: parameter %d got %v want %v (1 thread)", p.Threads(), k, got[k], want[k])
				}
			}
			// The parameters moved: a run that trained nothing would pass.
			cfg := DefaultConfig()
			cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize, cfg.Layers = f.cell, H, E, 2
			m0, _ := NewModel[float32](cfg, V, 7)
			if sameBits(m0.values, want) < 0 {
				t.Errorf("%s: training left every parameter unchanged", name)
			}
		})
	}
}
