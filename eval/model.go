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

// Distributor is implemented by models that can give the whole
// next-token distribution at once. Tests use it to check that every
// distribution sums to 1; samplers draw from it.
type Distributor interface {
	// Distribution writes P(w | history) to dst[w] for every token id w,
	// len(dst) == VocabSize(), with history read as a prefix of a
	// LogProbs sequence (its start is the start of a document).
	Distribution(dst []float64, history []int) error
}

// Kinder is implemented by models that name their family for the kind
// column of a Result: "ngram", "markov", "hmm", "interpolated", "uniform".
type Kinder interface {
	Kind() string
}

// StateBitser is implemented by models with a finite state, the hidden
// Markov models, reporting the memory that state can hold in bits.
type StateBitser interface {
	StateBits() float64
}

// TrainingNoter is implemented by models that may be fitted on a part of
// the training split (the n-gram models and Markov chains, whose counts a
// memory budget may limit to a subset): TrainingNote says how much of it,
// as in "counts from 200 M of 900 M training tokens", or is "" when they
// were fitted on all of it.
type TrainingNoter interface {
	TrainingNote() string
}

// ProgressScorer is implemented by models that report progress while
// scoring, as ProgressFunc describes.
type ProgressScorer interface {
	LogProbsProgress(ctx context.Context, dst []float64, seq []int, progress ProgressFunc) error
}

// LogProbsProgress scores seq with m as LogProbs does, reporting progress
// through m's LogProbsProgress when it has one, and otherwise once, at
// the end (stage "score" and the model's name).
func LogProbsProgress(ctx context.Context, m LanguageModel, dst []float64, seq []int, progress ProgressFunc) error {
	if p, ok := m.(ProgressScorer); ok {
		return p.LogProbsProgress(ctx, dst, seq, progress)
	}
	if err := m.LogProbs(ctx, dst, seq); err != nil {
		return err
	}
	progress.report("score "+m.Name(), len(seq), len(seq))
	return nil
}

// Score runs m over the held-out tokens seq and summarises the scores as
// a Result for the named split, with characters the length of the
// held-out text. It returns the per-token log-probabilities too, for
// Bootstrap, Marked and FrequencyBands. Kind and StateBits are filled in
// when m reports them; "unknown" otherwise.
func Score(ctx context.Context, m LanguageModel, split string, seq []int, characters int) (Result, []float64, error) {
	lp := make([]float64, len(seq))
	if err := m.LogProbs(ctx, lp, seq); err != nil {
		return Result{}, nil, err
	}
	kind := "unknown"
	if k, ok := m.(Kinder); ok {
		kind = k.Kind()
	}
	r := NewResult(m.Name(), kind, split, lp, characters)
	if s, ok := m.(StateBitser); ok {
		r.StateBits = s.StateBits()
	}
	r.SetTrainingNote(m)
	return r, lp, nil
}
