package onnx

import (
	"bytes"
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"weft/checkpoint"
	"weft/data"
	"weft/data/demo"
	"weft/rnn"
)

// exportCase is one model shape of the export tests.
type exportCase struct {
	name string
	cfg  rnn.Config
}

// small returns a model config of the given cell with small sizes, changed
// by edit.
func small(cell string, edit func(*rnn.Config)) rnn.Config {
	c := rnn.DefaultConfig()
	c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize = cell, 1, 12, 8
	if edit != nil {
		edit(&c)
	}
	return c
}

// exportCases covers every model weft trains: each cell and form, two
// layers, a projection, tied embeddings, one-hot input and the class
// output layer.
func exportCases() []exportCase {
	return []exportCase{
		{"lstm", small("lstm", nil)},
		{"lstm-2layers-projection", small("lstm", func(c *rnn.Config) { c.Layers, c.ProjectionSize = 2, 6 })},
		{"gru-reset-after", small("gru", nil)},
		{"gru-reset-before-2layers", small("gru", func(c *rnn.Config) { c.GRUForm, c.Layers = "reset_before", 2 })},
		{"rnn-tanh", small("rnn", nil)},
		{"rnn-relu-onehot", small("rnn", func(c *rnn.Config) { c.Activation, c.EmbeddingSize = "relu", 0 })},
		{"lstm-tied-projection", small("lstm", func(c *rnn.Config) { c.TieEmbeddings, c.ProjectionSize = true, 8 })},
		{"gru-tied", small("gru", func(c *rnn.Config) { c.TieEmbeddings, c.HiddenSize = true, 8 })},
		{"lstm-class", small("lstm", func(c *rnn.Config) { c.OutputLayer = "class" })},
		{"gru-reset-before-class-tied-projection", small("gru", func(c *rnn.Config) {
			c.GRUForm, c.OutputLayer, c.OutputClasses, c.TieEmbeddings, c.ProjectionSize = "reset_before", "class", 5, true, 8
		})},
	}
}

// demoText returns size bytes (about) of the invented demo log.
func demoText(t testing.TB, seed uint64, size int) string {
	t.Helper()
	var b bytes.Buffer
	if _, err := demo.Generate(&b, seed, size); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// demoVocab is a char vocabulary (line boundary) learned on demo text.
func demoVocab(t testing.TB, size int) *data.Vocab {
	t.Helper()
	v, err := data.LearnVocab(context.Background(), strings.NewReader(demoText(t, 1, size)), "demo",
		data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// randomModel builds a model of cfg over v's ids and fills every
// parameter, biases included (which weft initialises to zero, and whose
// layout must be checked too), with seeded draws from U(−a, a), a =
// 1/√(fan-in) for matrices and 0.5 for vectors. Each value is k/1000·a for
// an integer k, one division and one product (no fused operation), so it
// is the same on every platform.
func randomModel(t testing.TB, cfg rnn.Config, v *data.Vocab, seed uint64) *rnn.Model[float32] {
	t.Helper()
	net, err := rnn.NewModelWithCounts[float32](cfg, checkpoint.VocabCounts(v), seed)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 0x6f6e6e78))
	for _, p := range net.Params() {
		a := float32(0.5)
		if len(p.Shape) == 2 {
			a = float32(1 / math.Sqrt(float64(p.Shape[1])))
		}
		for i := range p.Value {
			p.Value[i] = float32(rng.IntN(2001)-1000) / 1000 * a
		}
	}
	return net
}
