package eval

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func TestUniformPerplexity(t *testing.T) {
	// Common practice: a uniform model over V symbols
	// has per-token perplexity exactly V, and bits per token log2 V.
	for _, V := range []int{2, 27, 83, 1000} {
		u := Uniform{V}
		seq := make([]int, 500)
		for i := range seq {
			seq[i] = (i * 7) % V
		}
		lp := make([]float64, len(seq))
		if err := u.LogProbs(context.Background(), lp, seq); err != nil {
			t.Fatal(err)
		}
		r := NewResult(u.Name(), u.Kind(), "test", lp, len(seq))
		checkClose(t, "perplexity", r.Perplexity, float64(V), 1e-12)
		checkClose(t, "bits per token", r.BitsPerToken, math.Log2(float64(V)), 1e-12)
		checkClose(t, "bits per char", r.BitsPerChar, math.Log2(float64(V)), 1e-12)
	}
}

func TestBitsPerCharacter(t *testing.T) {
	// Bits per character is total bits / characters whatever the
	// tokenization (common practice), checked by hand on
	// "the cat sat" as four word tokens "the", " cat", " sat", "\n"
	// spanning 3+4+4+1 = 12 characters. With probabilities 1/4, 1/8, 1/2
	// and 1 the total is 2+3+1+0 = 6 bits: 0.5 bits per character, 1.5 bits
	// per token, perplexity 2^1.5.
	lp := []float64{math.Log(1.0 / 4), math.Log(1.0 / 8), math.Log(1.0 / 2), 0}
	chars := []int{3, 4, 4, 1}
	r := NewResult("hand", "test", "test", lp, 12)
	checkClose(t, "total bits", r.CrossEntropyBits, 6, tolExact)
	checkClose(t, "total nats", r.CrossEntropyNats, 6*math.Ln2, tolExact)
	checkClose(t, "bits per char", r.BitsPerChar, 0.5, tolExact)
	checkClose(t, "bits per token", r.BitsPerToken, 1.5, tolExact)
	checkClose(t, "perplexity", r.Perplexity, math.Pow(2, 1.5), 1e-14)

	// Marked positions: tokens 1 and 2 marked: 3+1 = 4 bits over 8 chars;
	// the rest 2+0 = 2 bits over 4 chars.
	mask, err := MarkIndices(4, []int{1, 2})
	if err != nil {
		t.Fatal(err)
	}
	in, out := Marked(lp, chars, mask)
	checkClose(t, "marked bpc", in.BitsPerChar, 0.5, tolExact)
	checkClose(t, "unmarked bpc", out.BitsPerChar, 0.5, tolExact)
	if in.Tokens != 2 || in.Characters != 8 || out.Characters != 4 {
		t.Errorf("marked split: got %+v / %+v", in, out)
	}
	if _, err := MarkIndices(4, []int{4}); err == nil {
		t.Error("a marked position past the end gave no error")
	}

	// Frequency bands: training counts 0, 1, 5, 120 for the four tokens.
	bands := FrequencyBands(lp, []int{0, 1, 2, 3}, chars, []int{0, 1, 5, 120})
	want := []struct {
		label string
		bpc   float64
	}{{"unseen", 2.0 / 3}, {"seen 1", 3.0 / 4}, {"seen 2-9", 1.0 / 4}, {"seen 100-999", 0}}
	if len(bands) != len(want) {
		t.Fatalf("bands: got %+v, want %d bands", bands, len(want))
	}
	for i, w := range want {
		if bands[i].Label != w.label || !close(bands[i].BitsPerChar, w.bpc, tolExact) {
			t.Errorf("band %d: got %s %.17g, want %s %.17g", i, bands[i].Label, bands[i].BitsPerChar, w.label, w.bpc)
		}
	}
}

func TestUnknownNotComparable(t *testing.T) {
	lp := []float64{-1, -1, -1, -1}
	r := NewResult("word", "rnn", "test", lp, 20)
	r.SetUnknown([]int{5, 0, 5, 2}, 0, true)
	if r.UnknownTokens != 1 || r.UnknownRate != 0.25 || r.Comparable || !strings.Contains(r.NotComparable, "unknown symbol") {
		t.Errorf("closed vocabulary: got %d unknown, rate %g, comparable %v (%q)", r.UnknownTokens, r.UnknownRate, r.Comparable, r.NotComparable)
	}
	r = NewResult("char", "ngram", "test", lp, 4)
	r.SetUnknown([]int{5, 0, 5, 2}, 0, false)
	if !r.Comparable || r.UnknownTokens != 1 {
		t.Errorf("open vocabulary: got comparable %v, %d unknown", r.Comparable, r.UnknownTokens)
	}
}

func TestResultJSON(t *testing.T) {
	r := NewResult("3-gram max_likelihood", "ngram", "test", []float64{math.Inf(-1), -1}, 2)
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	s := string(b)
	// The keys the issue fixes, in this order, and infinities kept.
	keys := []string{"model", "kind", "split", "tokens", "characters", "cross_entropy_nats", "bits_per_token", "perplexity", "bits_per_char", "ci_low", "ci_high"}
	last := -1
	for _, k := range keys {
		i := strings.Index(s, `"`+k+`":`)
		if i < 0 || i < last {
			t.Errorf("key %q missing or out of order in %s", k, s)
		}
		last = i
	}
	// One convention for values that are not finite, infinite or not
	// computed: null (issue 10).
	if !strings.Contains(s, `"bits_per_char":null`) || !strings.Contains(s, `"ci_low":null`) || strings.Contains(s, "Inf") {
		t.Errorf("infinite and missing values: got %s", s)
	}
	var back Result
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(back.BitsPerChar, 1) || !math.IsNaN(back.CILow) || back.Model != r.Model || back.Tokens != 2 {
		t.Errorf("round trip: got %+v", back)
	}
}

func TestMixture(t *testing.T) {
	// Two models, each right half the time: the tuned weight must find
	// the optimum of λ·p + (1-λ)·q, here by symmetry λ = 1/2 when the
	// data favour each equally, and move towards the better model
	// otherwise.
	a := []float64{math.Log(0.9), math.Log(0.1), math.Log(0.9), math.Log(0.1)}
	b := []float64{math.Log(0.1), math.Log(0.9), math.Log(0.1), math.Log(0.9)}
	l, err := TuneMixture(a, b)
	if err != nil {
		t.Fatal(err)
	}
	checkClose(t, "symmetric λ", l, 0.5, 1e-9)
	// A better everywhere: the likelihood grows with λ, so λ → 1.
	l, err = TuneMixture([]float64{-1, -1, -1}, []float64{-2, -2, -2})
	if err != nil {
		t.Fatal(err)
	}
	if l < 0.99 {
		t.Errorf("λ with A better everywhere: got %g, want near 1", l)
	}
	// The mixture of a model with itself is the model.
	dst := make([]float64, 4)
	MixLogProbs(dst, a, a, 0.3)
	for i := range dst {
		checkClose(t, "self-mixture", dst[i], a[i], tolExact)
	}
	// Against a brute-force search of the likelihood on a grid.
	rng := rand.New(rand.NewPCG(5, 6))
	x := make([]float64, 300)
	y := make([]float64, 300)
	for i := range x {
		x[i] = math.Log(rng.Float64())
		y[i] = math.Log(rng.Float64() * 0.7)
	}
	l, _ = TuneMixture(x, y)
	ll := func(l float64) float64 {
		s := 0.0
		for i := range x {
			s += logAddExp(math.Log(l)+x[i], math.Log1p(-l)+y[i])
		}
		return s
	}
	for g := 0.001; g < 1; g += 0.001 {
		if ll(g) > ll(l)+1e-6 {
			t.Fatalf("λ=%g has likelihood %g above the tuned λ=%g's %g", g, ll(g), l, ll(l))
		}
	}
}

func TestScoreAndMarkov(t *testing.T) {
	// Score fills kind and state bits from the model; a Markov chain is
	// the add-k model of order k+1 (same probabilities) under its own name.
	w, seq := samCorpus(t)
	c, err := CountNGrams(seq, len(w.list), 3, w.id("</s>"), nil)
	if err != nil {
		t.Fatal(err)
	}
	mc, err := NewMarkovChain(c, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	r, lp, err := Score(context.Background(), mc, "test", seq, 50)
	if err != nil {
		t.Fatal(err)
	}
	if r.Kind != "markov" || r.Model != "markov-1(add 1)" || len(lp) != len(seq) {
		t.Errorf("markov row: got kind %q, model %q", r.Kind, r.Model)
	}
	// J&M ch. 3 add-one: P*(am | I) = (2+1)/(3+11).
	checkClose(t, "markov P(am|I)", probOf(t, mc, w, "am", "I"), 3.0/14, tolExact)
	h, _ := NewHMM([]float64{.5, .5, 0, 0}, []float64{.25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25, .25},
		[]float64{.5, .5, .5, .5, .5, .5, .5, .5}, 4, 2)
	r, _, err = Score(context.Background(), h, "test", []int{0, 1, 1}, 3)
	if err != nil {
		t.Fatal(err)
	}
	// Every symbol has probability 1/2 whatever the state: 1 bit each.
	if r.StateBits != 2 || r.Kind != "hmm" || !close(r.BitsPerChar, 1, tolExact) {
		t.Errorf("hmm row: got state bits %g, kind %q, bpc %g; want 2, hmm, 1", r.StateBits, r.Kind, r.BitsPerChar)
	}
}
