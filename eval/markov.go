package eval

import (
	"fmt"
)

// MarkovChain is the plainest memoryless predictor: a fixed-order Markov
// chain that conditions on exactly the last k tokens, with additive
// smoothing and no interpolation with shorter contexts,
//
//	P(w | h) = (c(h w) + δ) / (c(h •) + δ·V),
//
// where h is the k tokens before w (padded at the start of a document). It
// is the AddK n-gram model of order k+1, kept as its own row because it
// answers a different question: how far k tokens of memory get without any
// smoothing cleverness.
type MarkovChain struct {
	*NGram
	k int
}

// NewMarkovChain returns the chain of context length k (0..c.Order()-1)
// with pseudo-count delta (above 0) read from the counts c.
func NewMarkovChain(c *Counts, k int, delta float64) (*MarkovChain, error) {
	if !(delta > 0) {
		return nil, fmt.Errorf("markov chain: pseudo-count %g is not positive", delta)
	}
	m, err := NewNGram(c, k+1, Smoothing{Method: AddK, K: delta})
	if err != nil {
		return nil, fmt.Errorf("markov chain of order %d: %w", k, err)
	}
	return &MarkovChain{m, k}, nil
}

// Name is a label such as "markov-2(add 1)".
func (m *MarkovChain) Name() string {
	return BaselineSpec{Kind: "markov", Context: m.k, K: m.sm.K}.String()
}

// Kind is "markov".
func (m *MarkovChain) Kind() string { return "markov" }

// ContextLength is k.
func (m *MarkovChain) ContextLength() int { return m.k }
