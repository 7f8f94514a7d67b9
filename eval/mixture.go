package eval

import (
	"context"
	"errors"
	"fmt"
	"math"
)

// Uniform is the model giving each of V tokens probability 1/V, whatever
// the history; its per-token perplexity is exactly V.
type Uniform struct{ V int }

// Name is "uniform".
func (u Uniform) Name() string { return "uniform" }

// Kind is "uniform".
func (u Uniform) Kind() string { return "uniform" }

// VocabSize is V.
func (u Uniform) VocabSize() int { return u.V }

// LogProbs writes -ln V everywhere.
func (u Uniform) LogProbs(ctx context.Context, dst []float64, seq []int) error {
	if len(dst) != len(seq) {
		panic("eval: LogProbs: len(dst) != len(seq)")
	}
	lp := -math.Log(float64(u.V))
	for i, w := range seq {
		if w < 0 || w >= u.V {
			return fmt.Errorf("uniform: token %d at position %d outside 0..%d", w, i, u.V-1)
		}
		dst[i] = lp
	}
	return ctx.Err()
}

// Distribution writes 1/V everywhere.
func (u Uniform) Distribution(dst []float64, history []int) error {
	for w := range dst {
		dst[w] = 1 / float64(u.V)
	}
	return nil
}

// Mixture is the linear interpolation of two models over the same
// vocabulary,
//
//	P(w | h) = λ·P_A(w | h) + (1-λ)·P_B(w | h),
//
// the classic cheap combination of a recurrent model with an n-gram
// model (Mikolov 2012 reports it on Penn Treebank).
type Mixture struct {
	A, B   LanguageModel
	Lambda float64
}

// NewMixture returns the mixture with weight lambda (0..1) on a.
func NewMixture(a, b LanguageModel, lambda float64) (*Mixture, error) {
	if a.VocabSize() != b.VocabSize() {
		return nil, fmt.Errorf("mixture: %s predicts %d tokens, %s %d", a.Name(), a.VocabSize(), b.Name(), b.VocabSize())
	}
	if !(lambda >= 0 && lambda <= 1) {
		return nil, fmt.Errorf("mixture: weight %g outside 0..1", lambda)
	}
	return &Mixture{a, b, lambda}, nil
}

// Name is "A + B (λ=0.63)".
func (m *Mixture) Name() string {
	return fmt.Sprintf("%s + %s (λ=%.3g)", m.A.Name(), m.B.Name(), m.Lambda)
}

// Kind is "interpolated".
func (m *Mixture) Kind() string { return "interpolated" }

// VocabSize is the models' shared vocabulary size.
func (m *Mixture) VocabSize() int { return m.A.VocabSize() }

// LogProbs scores seq with both models and mixes them (MixLogProbs).
func (m *Mixture) LogProbs(ctx context.Context, dst []float64, seq []int) error {
	if len(dst) != len(seq) {
		panic("eval: LogProbs: len(dst) != len(seq)")
	}
	b := make([]float64, len(seq))
	if err := m.A.LogProbs(ctx, dst, seq); err != nil {
		return err
	}
	if err := m.B.LogProbs(ctx, b, seq); err != nil {
		return err
	}
	MixLogProbs(dst, dst, b, m.Lambda)
	return nil
}

// MixLogProbs writes ln(λ·e^a[i] + (1-λ)·e^b[i]) to dst[i], computed
// without underflow; dst may be a or b.
func MixLogProbs(dst, a, b []float64, lambda float64) {
	if len(a) != len(dst) || len(b) != len(dst) {
		panic("eval: MixLogProbs: lengths differ")
	}
	la, lb := math.Log(lambda), math.Log1p(-lambda)
	for i := range dst {
		dst[i] = logAddExp(la+a[i], lb+b[i])
	}
}

func logAddExp(x, y float64) float64 {
	if x < y {
		x, y = y, x
	}
	if math.IsInf(x, -1) {
		return x
	}
	return x + math.Log1p(math.Exp(y-x))
}

// TuneMixture returns the weight λ maximising the mixture's likelihood of
// a validation text scored by two models (natural log-probabilities a and
// b of the same tokens), by expectation-maximisation on λ: each step sets
// λ to the mean posterior responsibility of model A,
//
//	λ' = (1/T) Σ_t λ·e^a[t] / (λ·e^a[t] + (1-λ)·e^b[t]),
//
// which never lowers the likelihood (Dempster, Laird & Rubin 1977); it
// stops when λ moves by less than 1e-7 or after 500 steps, starting from
// 0.5.
func TuneMixture(a, b []float64) (float64, error) {
	if len(a) != len(b) {
		return 0, fmt.Errorf("tune mixture: %d and %d log-probabilities", len(a), len(b))
	}
	if len(a) == 0 {
		return 0, errors.New("tune mixture: no validation tokens")
	}
	lambda := 0.5
	for range 500 {
		la, lb := math.Log(lambda), math.Log1p(-lambda)
		var r float64
		for t := range a {
			x, y := la+a[t], lb+b[t]
			z := logAddExp(x, y)
			if math.IsInf(z, -1) {
				continue // both models gave zero: no information on λ
			}
			r += math.Exp(x - z)
		}
		next := r / float64(len(a))
		if math.Abs(next-lambda) < 1e-7 {
			return next, nil
		}
		lambda = next
	}
	return lambda, nil
}
