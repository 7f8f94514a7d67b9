package bench_test

import (
	"slices"
	"testing"

	"weft/configs"
	"weft/rnn"
	"weft/rnn/bench"
)

// TestFLOPs checks the operation count against the project's
// reference LSTM (6 × (E·4H + H·4H + H·V) = 6 × 352,256 per token for
// V=96, E=64, H=256) and against counts worked out by hand.
func TestFLOPs(t *testing.T) {
	tests := []struct {
		name string
		sets []string
		V    int
		want float64
	}{
		{"reference lstm", nil, 96, 6 * 352256},
		// 2 layers, E=128, H=512, G=2048: 128·2048 + 3·512·2048 + 512·96
		// = 262,144 + 3,145,728 + 49,152 = 3,457,024 multiply-adds.
		{"2-layer lstm", []string{"model.layers=2", "model.hidden_size=512", "model.embedding_size=128"}, 96, 6 * 3457024},
		// GRU, E=H=256, G=768: 256·768 + 256·768 + 256·10000 = 2,953,216.
		{"gru word", []string{"model.cell=gru", "model.embedding_size=256"}, 10000, 6 * 2953216},
		// Class layer, V=10000 in C=100 classes of 100 ids (equal sizes for
		// uniform counts; rnn.NewModel): K·(C + n̄) = 256·(100 + 100) =
		// 51,200, plus the GRU's 256·768 + 256·768 = 393,216.
		{"gru word, class layer", []string{"model.cell=gru", "model.embedding_size=256", "model.output_layer=class", "model.output_classes=100"}, 10000, 6 * 444416},
		// One-hot input (a gather, no product), projection P=32:
		// 256·1024 + 256·32 + 32·96 = 262,144 + 8,192 + 3,072 = 273,408.
		{"one-hot with projection", []string{"model.embedding_size=0", "model.projection_size=32"}, 96, 6 * 273408},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r, err := configs.Parse("--set", []byte("[data]\nfiles = [\"-\"]\n"), tt.sets)
			if err != nil {
				t.Fatal(err)
			}
			var start []int
			if r.Model.OutputLayer == "class" {
				net, err := rnn.NewModel[float32](r.Model, tt.V, 1)
				if err != nil {
					t.Fatal(err)
				}
				start = net.OutputClasses()
			}
			got, formula := bench.FLOPs(r.Model, tt.V, start)
			if got != tt.want {
				t.Errorf("got %v FLOP per token (%s), want %v", got, formula, tt.want)
			}
		})
	}
}

// TestWindows checks that the synthetic windows are continuous
// streams (a window's last target is the next window's first input) of
// ids below V, the same for the same seed.
func TestWindows(t *testing.T) {
	const V, B, T, n = 7, 3, 5, 4
	w := bench.Windows(V, B, T, n, 1)
	for k := range w {
		for i := range w[k].Inputs {
			if w[k].Inputs[i] < 0 || w[k].Inputs[i] >= V || w[k].Targets[i] < 0 || w[k].Targets[i] >= V {
				t.Fatalf("window %d position %d: ids %d, %d outside 0..%d", k, i, w[k].Inputs[i], w[k].Targets[i], V-1)
			}
		}
		for tt := 0; tt+1 < T; tt++ {
			for b := 0; b < B; b++ {
				if w[k].Targets[tt*B+b] != w[k].Inputs[(tt+1)*B+b] {
					t.Errorf("window %d step %d stream %d: target %d, next input %d", k, tt, b, w[k].Targets[tt*B+b], w[k].Inputs[(tt+1)*B+b])
				}
			}
		}
		if k+1 < n {
			for b := 0; b < B; b++ {
				if got, want := w[k].Targets[(T-1)*B+b], w[k+1].Inputs[b]; got != want {
					t.Errorf("window %d stream %d: last target %d, next window's first input %d", k, b, got, want)
				}
			}
		}
	}
	again := bench.Windows(V, B, T, n, 1)
	if !slices.Equal(w[n-1].Inputs, again[n-1].Inputs) {
		t.Errorf("same seed gave different tokens")
	}
}

func TestSweepCounts(t *testing.T) {
	for _, tt := range []struct {
		cores int
		want  []int
	}{
		{1, []int{1}},
		{2, []int{1, 2}},
		{6, []int{1, 2, 4, 6}},
		{16, []int{1, 2, 4, 8, 16}},
		{24, []int{1, 2, 4, 8, 16, 24}},
	} {
		if got := bench.SweepCounts(tt.cores); !slices.Equal(got, tt.want) {
			t.Errorf("%d cores: got %v, want %v", tt.cores, got, tt.want)
		}
	}
}

// TestTrainRefuses: sizes out of range are errors, not panics.
func TestTrainRefuses(t *testing.T) {
	r, err := configs.Parse("--set", []byte("[data]\nfiles = [\"-\"]\n"), []string{"model.hidden_size=8", "model.embedding_size=4", "training.batch_size=2", "training.unroll_steps=4"})
	if err != nil {
		t.Fatal(err)
	}
	for _, o := range []bench.Options{{Vocab: 0, Windows: 1}, {Vocab: 5, Windows: 0}, {Vocab: 5, Windows: 1, Warmup: -1}} {
		if _, err := bench.Train(t.Context(), r.Model, r.Training.TrainConfig, o); err == nil {
			t.Errorf("%+v: no error", o)
		}
	}
	rep, err := bench.Train(t.Context(), r.Model, r.Training.TrainConfig, bench.Options{Vocab: 5, Windows: 3, Warmup: 1})
	if err != nil {
		t.Fatal(err)
	}
	// 3 windows of 2 streams × 4 steps, every position a target.
	if rep.Tokens != 24 || rep.Windows != 3 || !(rep.TokensPerSecond > 0) {
		t.Errorf("report %d tokens in %d windows at %v tokens/s; want 24 in 3", rep.Tokens, rep.Windows, rep.TokensPerSecond)
	}
}
