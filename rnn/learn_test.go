package rnn

import (
	"bytes"
	"context"
	"math"
	"os"
	"testing"

	"weft/data/corpustest"
	"weft/data/demo"
)

// TestLearnsMobyDick trains a small character LSTM on the start of
// Moby-Dick and requires its training loss to fall below the cross-entropy
// of the unigram model of the same text (the entropy of its character
// frequencies, computed here), within a bounded number of steps. Beating the
// unigram needs context: the model must have learned something. For scale,
// Shannon (1951) gives F1 = 4.03 bits per letter for 27-letter English, and
// an LSTM with long context reaches well below 2 (Graves 2013, enwik8 1.67).
func TestLearnsMobyDick(t *testing.T) {
	raw, err := os.ReadFile(corpustest.MobyDick(t))
	if err != nil {
		t.Fatal(err)
	}
	learnText(t, string(raw))
}

// TestLearnsDemo does the same on weft's generated demo corpus (package
// weft/data/demo, seed 1).
func TestLearnsDemo(t *testing.T) {
	var buf bytes.Buffer
	if _, err := demo.Generate(&buf, 1, 300000); err != nil {
		t.Fatal(err)
	}
	learnText(t, buf.String())
}

func learnText(t *testing.T, s string) {
	text := []rune(s)
	if len(text) > 300000 {
		text = text[:300000]
	}
	// Characters to ids, in order of first appearance.
	ids := map[rune]int{}
	tokens := make([]int, len(text))
	for i, r := range text {
		id, ok := ids[r]
		if !ok {
			id = len(ids)
			ids[r] = id
		}
		tokens[i] = id
	}
	V := len(ids)
	counts := make([]float64, V)
	for _, id := range tokens {
		counts[id]++
	}
	var unigram float64 // nats per character
	for _, c := range counts {
		p := c / float64(len(tokens))
		unigram -= p * math.Log(p)
	}

	// The bigram model fitted to the same text by maximum likelihood has
	// training cross-entropy H(X_t | X_{t−1}) (Jurafsky & Martin ch. 3 MLE
	// bigrams); going below it needs more than one character of context.
	pair := map[[2]int]float64{}
	for i := 1; i < len(tokens); i++ {
		pair[[2]int{tokens[i-1], tokens[i]}]++
	}
	prev := make([]float64, V)
	for i := 0; i+1 < len(tokens); i++ {
		prev[tokens[i]]++
	}
	var bigram float64
	n := float64(len(tokens) - 1)
	for k, c := range pair {
		bigram -= c / n * math.Log(c/prev[k[0]])
	}

	cfg := DefaultConfig()
	cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize = "lstm", 128, 32
	tc := DefaultTrainConfig()
	tc.Optimizer, tc.LearningRate, tc.BatchSize, tc.UnrollSteps = "adam", 0.01, 16, 32
	m, err := NewModel[float32](cfg, V, 1)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := NewTrainer(m, tc, nil)
	if err != nil {
		t.Fatal(err)
	}
	// The loss averaged over 20 steps must beat the unigram, and within 400
	// steps the bigram too (81 were needed on Moby-Dick and 60 on the demo
	// corpus when this was written).
	const maxSteps, window = 400, 20
	first, recent, steps := trainUntil(t, tr, tokens, tc, maxSteps, window, bigram)
	t.Logf("V=%d, unigram %.4f and bigram %.4f nats/char; first step %.4f, mean of last %d steps %.4f after %d steps",
		V, unigram, bigram, first, len(recent), mean(recent), steps)
	// The first loss is near ln V (uniform-ish initial model, common practice).
	if math.Abs(first-math.Log(float64(V))) > 0.2 {
		t.Errorf("first loss %.4f, want about ln V = %.4f", first, math.Log(float64(V)))
	}
	if mean(recent) >= unigram {
		t.Errorf("after %d steps the training loss is %.4f nats/char, not below the unigram's %.4f", steps, mean(recent), unigram)
	}
	if mean(recent) >= bigram {
		t.Errorf("after %d steps the training loss is %.4f nats/char, not below the bigram's %.4f", steps, mean(recent), bigram)
	}
}

// trainUntil trains tr on contiguous streams over tokens until the loss
// averaged over the last window steps falls below target, or maxSteps
// steps. It returns the first step's loss, the last window losses and the
// steps taken.
func trainUntil(t *testing.T, tr *Trainer[float32], tokens []int, tc TrainConfig, maxSteps, window int, target float64) (first float64, recent []float64, steps int) {
	t.Helper()
	b := &streamBatches{tokens: tokens, B: tc.BatchSize, T: tc.UnrollSteps}
	ctx := context.Background()
	for steps < maxSteps {
		w, err := b.Next(ctx)
		if err != nil {
			t.Fatal(err)
		}
		info, err := tr.Step(ctx, w)
		if err != nil {
			t.Fatal(err)
		}
		steps++
		if steps == 1 {
			first = info.Loss
		}
		recent = append(recent, info.Loss)
		if len(recent) > window {
			recent = recent[1:]
		}
		if len(recent) == window && mean(recent) < target {
			break
		}
	}
	return first, recent, steps
}

func mean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}
