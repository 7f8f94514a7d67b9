package checkpoint

import (
	"context"
	"path/filepath"
	"testing"

	"weft/rnn"
)

// TestClassModelRoundTrip saves a trained model with the class-based output
// layer and loads it back: the classes come again from the counts the
// checkpoint's vocabulary records, and the loaded model scores the text
// exactly as the saved one did.
func TestClassModelRoundTrip(t *testing.T) {
	v := testVocab(t)
	cfg := smallConfig("lstm")
	cfg.OutputLayer, cfg.OutputClasses = "class", 4
	m, err := rnn.NewModelWithCounts[float32](cfg, VocabCounts(v), 2)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := rnn.NewTrainer(m, smallTrainConfig("adam"), nil)
	if err != nil {
		t.Fatal(err)
	}
	trainOn(t, tr, windows(v, 3))
	// The counts make the classes: the commonest characters share the
	// first classes, unlike the equal-size classes NewModel would give.
	uniform, err := rnn.NewModel[float32](cfg, v.Len(), 2)
	if err != nil {
		t.Fatal(err)
	}
	if same(m.OutputClasses(), uniform.OutputClasses()) {
		t.Fatalf("classes from counts %v equal the equal-size ones", m.OutputClasses())
	}
	f, err := NewModelFile(m, m.Config(), v, nil)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "m.safetensors")
	if err := Save(path, f); err != nil {
		t.Fatal(err)
	}
	got, err := LoadModel(path)
	if err != nil {
		t.Fatal(err)
	}
	if !same(got.Net.OutputClasses(), m.OutputClasses()) {
		t.Fatalf("loaded classes %v, saved %v", got.Net.OutputClasses(), m.OutputClasses())
	}
	if got.Config.OutputLayer != "class" || got.Config.OutputClasses != 4 {
		t.Fatalf("loaded config output_layer %q output_classes %d", got.Config.OutputLayer, got.Config.OutputClasses)
	}
	seq := v.Encode(nil, modelText)
	want := make([]float64, len(seq))
	have := make([]float64, len(seq))
	if err := m.LogProbs(context.Background(), want, seq); err != nil {
		t.Fatal(err)
	}
	if err := got.Net.LogProbs(context.Background(), have, seq); err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if have[i] != want[i] { // same weights, same code: bit-identical
			t.Fatalf("position %d: loaded model ln P %v, saved %v", i, have[i], want[i])
		}
	}
}

func same(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}
