package eval

import (
	"context"
	"math"
	"os"
	"testing"

	"weft/data/corpustest"
)

// mobyDick returns the Moby-Dick text as character ids (one id a rune, in
// order of first sight) and the vocabulary size.
func mobyDick(t testing.TB) ([]int, int) {
	t.Helper()
	b, err := os.ReadFile(corpustest.MobyDick(t))
	if err != nil {
		t.Fatal(err)
	}
	ids := map[rune]int{}
	var seq []int
	for _, r := range string(b) {
		id, ok := ids[r]
		if !ok {
			id = len(ids)
			ids[r] = id
		}
		seq = append(seq, id)
	}
	return seq, len(ids)
}

func TestMobyDick(t *testing.T) {
	seq, V := mobyDick(t)
	cut := len(seq) * 9 / 10 // first 90% train, last 10% held out
	train, test := seq[:cut], seq[cut:]
	c, err := CountNGrams(train, V, 5, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	bpc := func(s Smoothing, order int) float64 {
		m, err := NewNGram(c, order, s)
		if err != nil {
			t.Fatal(err)
		}
		lp := make([]float64, len(test))
		if err := m.LogProbs(context.Background(), lp, test); err != nil {
			t.Fatal(err)
		}
		r := NewResult(m.Name(), m.Kind(), "test", lp, len(test))
		t.Logf("%-26s %.4f bits/char", m.Name(), r.BitsPerChar)
		return r.BitsPerChar
	}
	// Order-0 entropy of the training characters, -Σ p log2 p: about
	// 4.4-4.5 bits for English prose with case and punctuation (common
	// practice; shared/DATA.md); the issue asks for 4.3-4.6.
	h := 0.0
	for _, n := range TokenCounts(train, V) {
		if n > 0 {
			p := float64(n) / float64(len(train))
			h -= p * math.Log2(p)
		}
	}
	t.Logf("order-0 entropy of the training text: %.4f bits/char (V = %d)", h, V)
	if h < 4.3 || h > 4.6 {
		t.Errorf("order-0 entropy: got %.4f bits/char, want 4.3-4.6", h)
	}
	if u := bpc(Smoothing{Method: AddK, K: 1}, 1); u < 4.3 || u > 4.6 {
		t.Errorf("held-out unigram add-one: got %.4f bits/char, want 4.3-4.6", u)
	}
	// Kneser-Ney of order 5 beats add-one of order 5 (Chen & Goodman 1998
	// find interpolated Kneser-Ney best and additive smoothing worst).
	add1 := bpc(Smoothing{Method: AddK, K: 1}, 5)
	kn := bpc(Smoothing{Method: KneserNey}, 5)
	mkn := bpc(Smoothing{Method: ModifiedKneserNey}, 5)
	wb := bpc(Smoothing{Method: WittenBell}, 5)
	if !(kn < add1) {
		t.Errorf("5-gram Kneser-Ney %.4f bits/char does not beat add-one %.4f", kn, add1)
	}
	if !(mkn < add1 && wb < add1) {
		t.Errorf("5-gram modified Kneser-Ney %.4f and Witten-Bell %.4f should beat add-one %.4f", mkn, wb, add1)
	}
	// Shannon (1951) puts English at 0.6-1.3 bits a letter with long
	// context and F3 ≈ 3.1 for trigrams of a 27-letter alphabet; a
	// 5-gram character model of one novel lands in between (common
	// practice: about 2-2.5 bits/char).
	if kn < 1.5 || kn > 3 {
		t.Errorf("5-gram Kneser-Ney: got %.4f bits/char, want 1.5-3", kn)
	}
}

func TestMobyDickHMM(t *testing.T) {
	// An HMM's few bits of state capture letter classes (vowels,
	// consonants, spaces), so 8 states should beat the unigram model
	// clearly on English characters (common practice; we measured 3.97
	// bits/char against the unigram's 4.51 here). Trained on the first 200k
	// characters for 15 iterations to keep the test short. This test caught
	// an initialisation too symmetric for EM to leave in 15 iterations.
	seq, V := mobyDick(t)
	cut := len(seq) * 9 / 10
	test := seq[cut : cut+50000]
	h, err := TrainHMM(context.Background(), seq[:200000], V, HMMOptions{States: 8, MaxIterations: 15, Seed: 1, Boundary: NoBoundary})
	if err != nil {
		t.Fatal(err)
	}
	r, _, err := Score(context.Background(), h, "test", test, len(test))
	if err != nil {
		t.Fatal(err)
	}
	c, err := CountNGrams(seq[:cut], V, 1, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	u, _ := NewNGram(c, 1, Smoothing{Method: AddK, K: 1})
	ru, _, _ := Score(context.Background(), u, "test", test, len(test))
	t.Logf("hmm-8: %.4f bits/char (state %g bits), unigram %.4f", r.BitsPerChar, r.StateBits, ru.BitsPerChar)
	if !(r.BitsPerChar < ru.BitsPerChar-0.2) {
		t.Errorf("8-state HMM %.4f bits/char does not beat the unigram %.4f by 0.2", r.BitsPerChar, ru.BitsPerChar)
	}
}

func TestSOTUWords(t *testing.T) {
	// Word level, on the State of the Union addresses (one address a
	// document): the Kneser-Ney methods beat additive smoothing clearly
	// (Chen & Goodman 1998 report interpolated and modified Kneser-Ney
	// best and additive smoothing worst on every corpus they tried). We
	// measured perplexities of about 11758 (add-one: V is the 25,708 word
	// types of all addresses), 171 (Witten-Bell), 139 and 136.
	words, V := sotuWords(t)
	train, test := words[:300000], words[300000:330000]
	c, err := CountNGrams(train, V, 3, 0, nil)
	if err != nil {
		t.Fatal(err)
	}
	ppl := map[Method]float64{}
	for _, s := range []Smoothing{{Method: AddK, K: 1}, {Method: WittenBell}, {Method: KneserNey}, {Method: ModifiedKneserNey}} {
		m, err := NewNGram(c, 3, s)
		if err != nil {
			t.Fatal(err)
		}
		r, _, err := Score(context.Background(), m, "test", test, len(test)) // perplexity only
		if err != nil {
			t.Fatal(err)
		}
		ppl[s.Method] = r.Perplexity
		t.Logf("%-26s perplexity %.1f", m.Name(), r.Perplexity)
	}
	if !(ppl[KneserNey] < ppl[AddK]*0.7 && ppl[ModifiedKneserNey] < ppl[AddK]*0.7) {
		t.Errorf("3-gram perplexities: Kneser-Ney %.1f, modified %.1f, add-one %.1f; want both Kneser-Ney below 0.7× add-one",
			ppl[KneserNey], ppl[ModifiedKneserNey], ppl[AddK])
	}
}
