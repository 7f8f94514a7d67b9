package checkpoint_test

import (
	"context"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"

	"weft/checkpoint"
	"weft/data"
	"weft/rnn"
)

// ExampleLoadModel shows how a Go program (a service that ranks log lines
// by surprise, say) loads a checkpoint, scores a line and samples a
// continuation. The model here is a tiny untrained one saved on the spot;
// a real program opens a trained run's checkpoint with
// runs.OpenModel(runDir, "best") (package weft/checkpoint/runs).
func ExampleLoadModel() {
	ctx := context.Background()

	// Build and save a tiny model deterministically: a vocabulary of the
	// characters of a short text, and an LSTM initialised from seed 1.
	v, err := data.LearnVocab(ctx, strings.NewReader("error: disk full\nok: saved\n"), "text",
		data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		log.Fatal(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.HiddenSize, cfg.EmbeddingSize = 16, 8
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		log.Fatal(err)
	}
	f, err := checkpoint.NewModelFile(net, net.Config(), v, nil)
	if err != nil {
		log.Fatal(err)
	}
	dir, err := os.MkdirTemp("", "weft-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "model.ckpt")
	if err := checkpoint.Save(path, f); err != nil {
		log.Fatal(err)
	}

	// Load it back: the network, its vocabulary and its config.
	m, err := checkpoint.LoadModel(path)
	if err != nil {
		log.Fatal(err)
	}

	// Score a line from the start of a document: ln P(token | history) for
	// every token, summed and turned into bits.
	line := "ok: disk saved\n"
	seq := m.Vocab.Encode(nil, line)
	logp := make([]float64, len(seq))
	if err := m.Net.LogProbs(ctx, logp, seq); err != nil {
		log.Fatal(err)
	}
	var nats float64
	for _, lp := range logp {
		nats -= lp
	}
	bits := nats / math.Ln2
	// An untrained model is close to uniform over its 16 entries: about
	// log2(16) = 4 bits per token.
	fmt.Printf("%d tokens, %.2f bits, %.2f bits per character\n", len(seq), bits, bits/float64(len([]rune(line))))

	// Sample 12 tokens after a prompt, seeded, at temperature 0.8, ending
	// early at the line boundary.
	s := m.Net.NewStream(1)
	if err := rnn.Prime(ctx, s, m.Vocab.Encode(nil, "ok")); err != nil {
		log.Fatal(err)
	}
	sp, err := rnn.NewSampler(rnn.Sampling{Temperature: 0.8}, rand.New(rand.NewPCG(42, 0)))
	if err != nil {
		log.Fatal(err)
	}
	var ids []int
	var sampleNats float64
	_, err = rnn.Generate(ctx, s, sp, 12, func(t rnn.Token) (bool, error) {
		if t.ID == m.Vocab.Boundary() {
			return true, nil
		}
		ids = append(ids, t.ID)
		sampleNats -= t.LogProb
		return false, nil
	})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("sample %q, %.2f bits\n", "ok"+m.Vocab.Decode(ids), sampleNats/math.Ln2)
	// Output:
	// 15 tokens, 59.97 bits, 4.00 bits per character
	// sample "ok:l :f ", 23.96 bits
}
