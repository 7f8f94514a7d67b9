// Package modeltest holds test helpers shared by the packages that score,
// sample and train: the small seeded models tests run on (no training,
// fixed weights, so that each test is quick and its outputs repeatable),
// and the comparison of two checkpoints' training state that the
// exact-resume tests make.
package modeltest

import (
	"bytes"
	"context"
	"math"
	"reflect"
	"strings"
	"testing"

	"weft/checkpoint"
	"weft/data"
	"weft/rnn"
)

// Corpus is the default text the vocabulary of New is learned from.
const Corpus = "the cat sat on the mat.\nthe dog sat on the log.\na cat and a dog met.\n"

// New returns a random LSTM (hidden 24, embedding 8, weights uniform in
// ±0.9 from seed 7) over the vocabulary of corpus with the given tokenizer
// and boundary, its output bias set to ln(count + 1) of each entry so that
// samples favour the common pieces rather than being uniform noise.
func New(t testing.TB, corpus, tokenizer, boundary string) *checkpoint.Model {
	t.Helper()
	v, err := data.LearnVocab(context.Background(), strings.NewReader(corpus), "corpus",
		data.VocabOptions{Tokenizer: tokenizer, Boundary: boundary})
	if err != nil {
		t.Fatal(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.HiddenSize, cfg.EmbeddingSize = 24, 8
	cfg.Init, cfg.InitRange, cfg.RecurrentInit = "uniform", 0.9, "uniform"
	net, err := rnn.NewModel[float32](cfg, v.Len(), 7)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range net.Params() {
		if p.Name == "output.bias" {
			for id := range p.Value {
				p.Value[id] = float32(math.Log(float64(v.Count(id) + 1)))
			}
		}
	}
	return &checkpoint.Model{Net: net, Vocab: v, Config: net.Config()}
}

// SameTrainingState checks that two checkpoints hold the same training
// state: every tensor byte for byte, every metadata value, and the
// progress with its wall time left out (the one field that differs
// between an interrupted run and a straight one).
func SameTrainingState(t testing.TB, gotPath, wantPath string) {
	t.Helper()
	got, err := checkpoint.Load(gotPath)
	if err != nil {
		t.Fatal(err)
	}
	want, err := checkpoint.Load(wantPath)
	if err != nil {
		t.Fatal(err)
	}
	if len(got.Tensors) != len(want.Tensors) {
		t.Fatalf("%d tensors, want %d", len(got.Tensors), len(want.Tensors))
	}
	for i := range want.Tensors {
		g, w := got.Tensors[i], want.Tensors[i]
		if g.Name != w.Name || !reflect.DeepEqual(g.Shape, w.Shape) || !bytes.Equal(g.Data, w.Data) {
			t.Errorf("tensor %s differs from the uninterrupted run's", w.Name)
		}
	}
	for k, w := range want.Meta {
		if k == checkpoint.MetaProgress {
			continue
		}
		if got.Meta[k] != w {
			t.Errorf("metadata %s: got %.200s, want %.200s", k, got.Meta[k], w)
		}
	}
	gp, err := checkpoint.ReadProgress(got)
	if err != nil {
		t.Fatal(err)
	}
	wp, err := checkpoint.ReadProgress(want)
	if err != nil {
		t.Fatal(err)
	}
	gp.WallSeconds, wp.WallSeconds = 0, 0
	if !reflect.DeepEqual(gp, wp) {
		t.Errorf("progress: got %+v, want %+v", gp, wp)
	}
}
