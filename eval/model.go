// Package eval scores language models on held-out text: cross-entropy,
// perplexity and bits per character with bootstrap intervals, and the
// classical baselines (n-gram smoothers, Markov chains and hidden Markov
// models) that recurrent models are compared against.
package eval

import "context"

// LanguageModel is anything that assigns a probability to the next token
// given the ones before it. The recurrent models and every baseline satisfy
// it, so one piece of code scores them all.
type LanguageModel interface {
	// Name is a short label for tables, such as "kneser-ney-5".
	Name() string

	// VocabSize is the number of token ids the model predicts, 0..V-1.
	VocabSize() int

	// LogProbs writes to dst[i] the natural logarithm of
	// P(seq[i] | seq[:i]) for every i, where the history before seq[0] is
	// the start of a document. len(dst) must equal len(seq).
	LogProbs(ctx context.Context, dst []float64, seq []int) error
}
