package eval

import (
	"context"
	"errors"
	"fmt"
	"math"
	"path/filepath"
	"slices"
)

// Ladder is the set of baselines a Config asks for, fitted on one
// training split: n-gram models of every configured order and smoother and
// the Markov chains, all reading one Counts, and the hidden Markov models.
type Ladder struct {
	Counts *Counts
	NGrams []*NGram
	Markov []*MarkovChain
	HMMs   []*HMM
}

// FitLadder fits the baselines of cfg on the training split train (token
// ids below vocab; boundary as for CountNGrams), reading it window by
// window. The counts are taken once at the largest order any model needs,
// within cfg's ngram_memory (CountNGramsOf; Counts.TrainingNote says when
// they cover a subset); HMMs train on the first cfg.HMMMaxTokens tokens,
// the one part of the split held in memory as a whole (8 bytes a token),
// their emission floor drawn from the unigram counts of all of train
// (TrainHMM). progress, if not nil, hears about each stage.
func FitLadder(ctx context.Context, train TokenReader, vocab, boundary int, cfg Config, progress ProgressFunc) (*Ladder, error) {
	if err := cfg.Validate(); err != nil {
		return nil, fmt.Errorf("fit baselines: %w", err)
	}
	l := &Ladder{}
	if err := l.fitCounts(train, vocab, boundary, cfg, progress); err != nil {
		return nil, err
	}
	if len(cfg.HMMStates) == 0 {
		return l, nil
	}
	hmmTrain := readPrefix(train, cfg.HMMMaxTokens)
	// The emission floor of an HMM trained on the first HMMMaxTokens
	// tokens comes from the whole training split's unigram counts.
	unigram := TokenCountsOf(train, vocab)
	for _, n := range cfg.HMMStates {
		h, err := TrainHMM(ctx, hmmTrain, vocab, HMMOptions{
			States: n, MaxIterations: cfg.HMMMaxIterations, Tolerance: cfg.HMMTolerance,
			Seed: cfg.Seed, Boundary: boundary, Progress: progress, Unigram: unigram,
		})
		if err != nil {
			return nil, fmt.Errorf("fit baselines: %w", err)
		}
		l.HMMs = append(l.HMMs, h)
	}
	return l, nil
}

// maxOrder is the counts order the n-gram models and chains of cfg need.
func maxOrder(cfg Config) int {
	order := 0
	if len(cfg.NgramSmoothers) > 0 {
		for _, n := range cfg.NgramOrders {
			order = max(order, n)
		}
	}
	for _, k := range cfg.MarkovOrders {
		order = max(order, k+1)
	}
	return order
}

func (l *Ladder) fitCounts(train TokenReader, vocab, boundary int, cfg Config, progress ProgressFunc) error {
	order := maxOrder(cfg)
	if order == 0 {
		return nil
	}
	if l.Counts == nil {
		c, err := CountNGramsOf(train, vocab, order, boundary, CountOptions{
			Memory: cfg.NgramMemoryBytes(), Seed: cfg.Seed, Progress: progress})
		if err != nil {
			return fmt.Errorf("fit baselines: %w", err)
		}
		l.Counts = c
	}
	return l.build(cfg)
}

// build makes the n-gram models and chains of cfg from l.Counts.
func (l *Ladder) build(cfg Config) error {
	if l.Counts.Order() < maxOrder(cfg) {
		return fmt.Errorf("baselines: counts of order %d, the configuration needs %d", l.Counts.Order(), maxOrder(cfg))
	}
	methods, err := cfg.Methods()
	if err != nil {
		return err
	}
	orders := slices.Clone(cfg.NgramOrders)
	slices.Sort(orders)
	orders = slices.Compact(orders)
	for _, n := range orders {
		for _, m := range methods {
			s := Smoothing{Method: m}
			if m == AddK {
				s.K = cfg.AddK
			}
			g, err := NewNGram(l.Counts, n, s)
			if err != nil {
				return err
			}
			l.NGrams = append(l.NGrams, g)
		}
	}
	for _, k := range cfg.MarkovOrders {
		mc, err := NewMarkovChain(l.Counts, k, cfg.AddK)
		if err != nil {
			return err
		}
		l.Markov = append(l.Markov, mc)
	}
	return nil
}

// Models lists every baseline: n-grams, then chains, then HMMs.
func (l *Ladder) Models() []LanguageModel {
	var ms []LanguageModel
	for _, m := range l.NGrams {
		ms = append(ms, m)
	}
	for _, m := range l.Markov {
		ms = append(ms, m)
	}
	for _, m := range l.HMMs {
		ms = append(ms, m)
	}
	return ms
}

// CountsFile is the file of a saved ladder's folder that holds the n-gram
// counts at the largest order (every n-gram and Markov model is rebuilt
// from them).
const CountsFile = "ngram-counts.bin"

// HMMFile is the file of a saved ladder's folder that holds the hidden
// Markov model of the given number of states.
func HMMFile(states int) string { return fmt.Sprintf("hmm-%d.bin", states) }

// Save writes the ladder into the folder dir (which must exist) as a
// CountsFile and an HMMFile per hidden Markov model.
func (l *Ladder) Save(dir string) error {
	if l.Counts != nil {
		if err := SaveCounts(filepath.Join(dir, CountsFile), l.Counts); err != nil {
			return err
		}
	}
	for _, h := range l.HMMs {
		if err := SaveHMM(filepath.Join(dir, HMMFile(h.States())), h); err != nil {
			return err
		}
	}
	return nil
}

// LoadLadder reads a ladder saved by Save and rebuilds the models cfg
// lists. A file cfg needs but dir lacks is an error wrapping
// os.ErrNotExist, so the caller can fit afresh.
func LoadLadder(dir string, cfg Config) (*Ladder, error) {
	if err := cfg.Validate(); err != nil {
		return nil, fmt.Errorf("load baselines: %w", err)
	}
	l := &Ladder{}
	if maxOrder(cfg) > 0 {
		c, err := LoadCounts(filepath.Join(dir, CountsFile))
		if err != nil {
			return nil, err
		}
		l.Counts = c
		if err := l.build(cfg); err != nil {
			return nil, fmt.Errorf("load baselines %q: %w", dir, err)
		}
	}
	for _, n := range cfg.HMMStates {
		h, err := LoadHMM(filepath.Join(dir, HMMFile(n)))
		if err != nil {
			return nil, err
		}
		l.HMMs = append(l.HMMs, h)
	}
	return l, nil
}

// BestBaseline returns the index of the baseline row (kinds "ngram",
// "markov" and "hmm") with the lowest finite bits per character, or an
// error when there is none. Comparable rows are preferred; rows not
// comparable are considered only when no baseline row is comparable,
// which happens when a whole table is not (rows scored with one
// vocabulary share its unknown tokens and its lower-casing, so they rank
// alike by bits per character and by bits per token).
func BestBaseline(rows []Result) (int, error) {
	best := bestOf(rows, "ngram", "markov", "hmm")
	if best < 0 {
		return -1, errors.New("no baseline with a finite score")
	}
	return best, nil
}

// bestOf returns the index of the row of one of the kinds with the lowest
// finite bits per character, comparable rows first as BestBaseline says,
// or -1.
func bestOf(rows []Result, kinds ...string) int {
	for _, comparableOnly := range []bool{true, false} {
		best := -1
		for i, r := range rows {
			if !slices.Contains(kinds, r.Kind) || (comparableOnly && !r.Comparable) {
				continue
			}
			if math.IsInf(r.BitsPerChar, 0) || math.IsNaN(r.BitsPerChar) {
				continue
			}
			if best < 0 || r.BitsPerChar < rows[best].BitsPerChar {
				best = i
			}
		}
		if best >= 0 {
			return best
		}
	}
	return -1
}
