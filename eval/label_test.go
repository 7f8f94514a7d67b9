package eval

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// TestBaselineLabels: every label the models format parses back to the
// same model, and the spellings the command line accepts parse as
// documented.
func TestBaselineLabels(t *testing.T) {
	c, train := smallCounts(t)
	for _, m := range []Method{MaxLikelihood, AddK, WittenBell, Absolute, KneserNey, ModifiedKneserNey} {
		for _, order := range []int{1, 3} {
			sm := Smoothing{Method: m}
			if m == AddK {
				sm.K = 0.25
			}
			g, err := NewNGram(c, order, sm)
			if err != nil {
				t.Fatal(err)
			}
			s, err := ParseBaselineLabel(g.Name())
			if err != nil || s.String() != g.Name() || s.Kind != "ngram" || s.Order != order || s.Method != m || s.K != sm.K {
				t.Errorf("%s: parsed %+v, %v", g.Name(), s, err)
			}
		}
	}
	mc, err := NewMarkovChain(c, 2, 0.5)
	if err != nil {
		t.Fatal(err)
	}
	if s, err := ParseBaselineLabel(mc.Name()); err != nil || s != (BaselineSpec{Kind: "markov", Context: 2, K: 0.5}) {
		t.Errorf("%s: parsed %+v, %v", mc.Name(), s, err)
	}
	for _, tc := range []struct {
		label string
		want  BaselineSpec
	}{
		{"5-gram kneser_ney", BaselineSpec{Kind: "ngram", Order: 5, Method: KneserNey}},
		{"5-gram_kneser_ney", BaselineSpec{Kind: "ngram", Order: 5, Method: KneserNey}},
		{"5-gram-kneser_ney", BaselineSpec{Kind: "ngram", Order: 5, Method: KneserNey}},
		{"3-gram add_k", BaselineSpec{Kind: "ngram", Order: 3, Method: AddK}},
		{"3-gram add_k(1e-3)", BaselineSpec{Kind: "ngram", Order: 3, Method: AddK, K: 1e-3}},
		{"markov-2", BaselineSpec{Kind: "markov", Context: 2}},
		{"markov-0(add 2)", BaselineSpec{Kind: "markov", Context: 0, K: 2}},
		{"hmm-16", BaselineSpec{Kind: "hmm", States: 16}},
	} {
		if got, err := ParseBaselineLabel(tc.label); err != nil || got != tc.want {
			t.Errorf("%q: got %+v, %v; want %+v", tc.label, got, err, tc.want)
		}
	}
	for _, bad := range []string{"", "no such model", "hmm-", "hmm-x", "hmm-4(2)", "markov-2(2)", "5-gram", "5-gram good_turing",
		"3-gram kneser_ney(0.5)", "3-gram add_k(add 1)", "3-gram add_k(0)", "3-gram add_k(-1)", "3-gram add_k(x)", "-1-gram add_k", "3-gram add_k(1"} {
		if s, err := ParseBaselineLabel(bad); err == nil {
			t.Errorf("%q: parsed %+v, want an error", bad, s)
		}
	}
	// LoadBaseline finds the files Ladder.Save writes.
	dir := t.TempDir()
	cfg := DefaultConfig()
	cfg.NgramOrders, cfg.MarkovOrders, cfg.HMMStates, cfg.HMMMaxIterations = []int{3}, []int{1}, []int{2}, 2
	l, err := FitLadder(t.Context(), IntTokens(train), c.vocab, NoBoundary, cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := l.Save(dir); err != nil {
		t.Fatal(err)
	}
	for _, m := range l.Models() {
		s, err := ParseBaselineLabel(m.Name())
		if err != nil {
			t.Fatal(err)
		}
		got, err := LoadBaseline(dir, s, 0)
		if err != nil || got.Name() != m.Name() {
			t.Errorf("%s: loaded %v, %v", m.Name(), got, err)
		}
	}
	if _, err := LoadBaseline(dir, BaselineSpec{Kind: "hmm", States: 9}, 0); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing HMM: got %v, want os.ErrNotExist", err)
	}
	if _, err := os.Stat(filepath.Join(dir, CountsFile)); err != nil {
		t.Errorf("Save did not write %s: %v", CountsFile, err)
	}
}

// FuzzBaselineLabel: whatever parses formats back to a label that parses
// to the same spec.
func FuzzBaselineLabel(f *testing.F) {
	for _, s := range []string{"5-gram kneser_ney", "3-gram add_k(0.5)", "markov-2(add 1)", "hmm-16", "markov-1", "2-gram_witten_bell"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, label string) {
		s, err := ParseBaselineLabel(label)
		if err != nil {
			return
		}
		back, err := ParseBaselineLabel(s.String())
		if err != nil || back != s {
			t.Errorf("%q parsed %+v, formatted %q, parsed again %+v, %v", label, s, s.String(), back, err)
		}
	})
}
