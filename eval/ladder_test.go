package eval

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"testing"
)

func TestLadder(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	seq := make([]int, 3000)
	for i := range seq {
		seq[i] = rng.IntN(6)
		if i > 0 && rng.IntN(2) == 0 {
			seq[i] = (seq[i-1] + 1) % 6
		}
	}
	cfg := DefaultConfig()
	cfg.NgramOrders = []int{1, 3, 2, 3}
	cfg.HMMStates = []int{3}
	cfg.HMMMaxIterations = 3
	var stages []string
	l, err := FitLadder(context.Background(), IntTokens(seq[:2500]), 6, NoBoundary, cfg, func(stage string, done, total int) {
		if len(stages) == 0 || stages[len(stages)-1] != stage {
			stages = append(stages, stage)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	// 3 distinct orders × 5 smoothers, 2 chains, 1 HMM.
	if len(l.NGrams) != 15 || len(l.Markov) != 2 || len(l.HMMs) != 1 || len(l.Models()) != 18 {
		t.Fatalf("ladder: %d n-grams, %d chains, %d HMMs", len(l.NGrams), len(l.Markov), len(l.HMMs))
	}
	if len(stages) != 2 || stages[0] != "count 3-grams" || stages[1] != "baum-welch" {
		t.Errorf("progress stages: got %q", stages)
	}
	dir := t.TempDir()
	if err := l.Save(dir); err != nil {
		t.Fatal(err)
	}
	back, err := LoadLadder(dir, cfg)
	if err != nil {
		t.Fatal(err)
	}
	var rows []Result
	for i, m := range l.Models() {
		r, _, err := Score(context.Background(), m, "test", seq[2500:], 500)
		if err != nil {
			t.Fatal(err)
		}
		r2, _, err := Score(context.Background(), back.Models()[i], "test", seq[2500:], 500)
		if err != nil {
			t.Fatal(err)
		}
		if r.Model != r2.Model || r.BitsPerChar != r2.BitsPerChar {
			t.Errorf("loaded %s: %g bits/char, fitted %s: %g", r2.Model, r2.BitsPerChar, r.Model, r.BitsPerChar)
		}
		rows = append(rows, r)
	}
	best, err := BestBaseline(rows)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		if r.BitsPerChar < rows[best].BitsPerChar {
			t.Errorf("best baseline %s (%g) is beaten by %s (%g)", rows[best].Model, rows[best].BitsPerChar, r.Model, r.BitsPerChar)
		}
	}
	rows = append(rows, Result{Model: "rnn", Kind: "rnn", Comparable: true, BitsPerChar: 0.1},
		Result{Model: "ml", Kind: "ngram", Comparable: true, BitsPerChar: math.Inf(1)})
	if b2, _ := BestBaseline(rows); b2 != best {
		t.Errorf("a recurrent row or an infinite row was taken as the best baseline")
	}
	cfg.HMMStates = []int{4}
	if _, err := LoadLadder(dir, cfg); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("loading an HMM never saved: got %v, want os.ErrNotExist", err)
	}
}

func TestConfigValidate(t *testing.T) {
	if err := DefaultConfig().Validate(); err != nil {
		t.Fatalf("defaults: %v", err)
	}
	bad := DefaultConfig()
	bad.NgramOrders = []int{0}
	bad.NgramSmoothers = []string{"good_turing"}
	bad.BootstrapBlockChars = 0
	err := bad.Validate()
	for _, key := range []string{"ngram_orders", "ngram_smoothers", "bootstrap_block_chars"} {
		if err == nil || !strings.Contains(err.Error(), key) {
			t.Errorf("Validate: error %v does not name %s", err, key)
		}
	}
}

// TestBestBaselinePrefersComparable: a comparable row wins over a better
// row that is not comparable; when no baseline row is comparable (a whole
// table scored with one lower-cased vocabulary, say) the lowest finite one
// is taken.
func TestBestBaselinePrefersComparable(t *testing.T) {
	rows := []Result{
		{Model: "a", Kind: "ngram", BitsPerChar: 1.0},
		{Model: "b", Kind: "markov", BitsPerChar: 2.0, Comparable: true},
		{Model: "c", Kind: "hmm", BitsPerChar: 0.5},
	}
	if b, err := BestBaseline(rows); err != nil || b != 1 {
		t.Errorf("got %d (%v), want 1, the only comparable row", b, err)
	}
	rows[1].Comparable = false
	if b, err := BestBaseline(rows); err != nil || b != 2 {
		t.Errorf("none comparable: got %d (%v), want 2, the lowest", b, err)
	}
	if _, err := BestBaseline([]Result{{Kind: "rnn", BitsPerChar: 1}, {Kind: "ngram", BitsPerChar: math.Inf(1)}}); err == nil {
		t.Error("no finite baseline row gave no error")
	}
}
