package rnn

import "testing"

// TestMatMulCost checks the operation count against counts worked out by
// hand beside each case from the formula of MatMulCost's doc comment (for
// the reference LSTM, V=96, E=64, H=256: 6 × (E·4H + H·4H + H·V) =
// 6 × 352,256 per token), for every cell, stacked layers, one-hot input, a
// projection and the class layer.
func TestMatMulCost(t *testing.T) {
	cfg := func(cell string, layers, E, H, P int) Config {
		c := DefaultConfig()
		c.Cell, c.Layers, c.EmbeddingSize, c.HiddenSize, c.ProjectionSize = cell, layers, E, H, P
		return c
	}
	tests := []struct {
		name  string
		c     Config
		V     int
		start []int
		want  float64
		terms int
	}{
		// 64·1024 + 256·1024 + 256·96 = 65,536 + 262,144 + 24,576 = 352,256.
		{"reference lstm", cfg("lstm", 1, 64, 256, 0), 96, nil, 6 * 352256, 3},
		// 2 layers, E=128, H=512, G=2048: 128·2048 + 3·512·2048 + 512·96
		// = 262,144 + 3,145,728 + 49,152 = 3,457,024 multiply-adds.
		{"2-layer lstm", cfg("lstm", 2, 128, 512, 0), 96, nil, 6 * 3457024, 3},
		// GRU, E=H=256, G=768: 256·768 + 256·768 + 256·10000 = 2,953,216.
		{"gru word", cfg("gru", 1, 256, 256, 0), 10000, nil, 6 * 2953216, 3},
		// Vanilla, one-hot input (a gather, no product), H=100, G=100:
		// 100·100 + 100·50 = 15,000.
		{"vanilla one-hot", cfg("rnn", 1, 0, 100, 0), 50, nil, 6 * 15000, 2},
		// Projection P=32: 64·1024 + 256·1024 + 256·32 + 32·96
		// = 65,536 + 262,144 + 8,192 + 3,072 = 338,944.
		{"lstm with projection", cfg("lstm", 1, 64, 256, 32), 96, nil, 6 * 338944, 4},
		// Class layer, V=12 in classes of 2, 3 and 7 ids: n̄ = (4+9+49)/12,
		// K·(C + n̄) = 16·(3 + 62/12); GRU E=8, H=16, G=48: 8·48 + 16·48.
		{"gru class layer", cfg("gru", 1, 8, 16, 0), 12, []int{0, 2, 5, 12}, 6 * (8*48 + 16*48 + 16*(3+62.0/12)), 3},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, terms := tt.c.MatMulCost(tt.V, tt.start)
			if !closeTo(got, tt.want, 1e-12) {
				t.Errorf("got %v FLOP per token, want %v (terms %+v)", got, tt.want, terms)
			}
			if len(terms) != tt.terms {
				t.Errorf("got %d terms %+v, want %d", len(terms), terms, tt.terms)
			}
			var sum float64
			for _, term := range terms {
				sum += float64(term.Count) * float64(term.In) * term.Out
			}
			if !closeTo(6*sum, got, 1e-12) {
				t.Errorf("terms sum to %v FLOP, MatMulCost says %v", 6*sum, got)
			}
		})
	}
}

// TestChooseThreads pins the rule for training.threads = 0 on a table;
// parts = B·G·H / 2^19 is worked out beside each case.
func TestChooseThreads(t *testing.T) {
	cfg := func(cell string, H int) Config {
		c := DefaultConfig()
		c.Cell, c.HiddenSize = cell, H
		return c
	}
	tests := []struct {
		name         string
		c            Config
		batch, cores int
		want         int
	}{
		{"one core", cfg("lstm", 256), 32, 1, 1},
		{"no core count", cfg("lstm", 256), 32, 0, 1},
		{"two cores", cfg("lstm", 256), 32, 2, 2},
		// (a): 32·1024·256 = 2^23, 16 parts.
		{"(a) lstm 256, 16 cores", cfg("lstm", 256), 32, 16, 16},
		{"(a) lstm 256, 64 cores", cfg("lstm", 256), 32, 64, 16},
		// (b): 32·2048·512 = 2^25, 64 parts.
		{"(b) lstm 512, 16 cores", cfg("lstm", 512), 32, 16, 16},
		{"(b) lstm 512, 64 cores", cfg("lstm", 512), 32, 64, 64},
		// (c): 32·768·256 = 6,291,456, 12 parts.
		{"(c) gru 256, 16 cores", cfg("gru", 256), 32, 16, 12},
		// 32·512·128 = 2^21, 4 parts: never below 8 where 8 cores exist.
		{"lstm 128, 16 cores", cfg("lstm", 128), 32, 16, 8},
		{"lstm 128, 6 cores", cfg("lstm", 128), 32, 6, 6},
		// Vanilla 64, B=4: 4·64·64, no split: still 8.
		{"tiny rnn, 32 cores", cfg("rnn", 64), 4, 32, 8},
		// Batch 128 quadruples the step: 128·1024·256 = 2^25, 64 parts.
		{"(a) at batch 128, 48 cores", cfg("lstm", 256), 128, 48, 48},
	}
	for _, tt := range tests {
		if got := ChooseThreads(tt.c, tt.batch, tt.cores); got != tt.want {
			t.Errorf("%s: got %d threads, want %d", tt.name, got, tt.want)
		}
		if got := ChooseThreads(tt.c, tt.batch, tt.cores); tt.cores >= 8 && got < 8 {
			t.Errorf("%s: got %d threads on %d cores, want at least 8", tt.name, got, tt.cores)
		}
	}
}

// TestConfigGates checks Config.Gates against the cells' gate counts (the
// tensor table of doc.go: G = 1·H, 3·H, 4·H).
func TestConfigGates(t *testing.T) {
	for cell, want := range map[string]int{"rnn": 1, "gru": 3, "lstm": 4} {
		c := DefaultConfig()
		c.Cell = cell
		m, err := NewModel[float32](c, 5, 1)
		if err != nil {
			t.Fatal(err)
		}
		if got := c.Gates(); got != want || got != m.Cell().Gates() {
			t.Errorf("%s: got %d gates, want %d (model's cell: %d)", cell, got, want, m.Cell().Gates())
		}
	}
}
