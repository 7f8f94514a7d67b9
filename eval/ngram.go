package eval

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"strconv"
	"sync"
	"sync/atomic"
)

// Method names an n-gram smoothing method; the package documentation gives
// each one's equations.
type Method int

const (
	// MaxLikelihood is the unsmoothed relative frequency c(h w)/c(h •).
	MaxLikelihood Method = iota + 1
	// AddK is additive (Lidstone) smoothing; k = 1 is add-one (Laplace).
	AddK
	// WittenBell is Witten-Bell interpolation.
	WittenBell
	// Absolute is interpolated absolute discounting.
	Absolute
	// KneserNey is interpolated Kneser-Ney with one discount an order.
	KneserNey
	// ModifiedKneserNey is interpolated Kneser-Ney with three discounts an
	// order, D1, D2 and D3+ (Chen & Goodman 1998).
	ModifiedKneserNey
)

var methodNames = [...]string{
	MaxLikelihood:     "max_likelihood",
	AddK:              "add_k",
	WittenBell:        "witten_bell",
	Absolute:          "absolute",
	KneserNey:         "kneser_ney",
	ModifiedKneserNey: "modified_kneser_ney",
}

// String returns the method's configuration name, such as "kneser_ney".
func (m Method) String() string {
	if m >= MaxLikelihood && int(m) < len(methodNames) {
		return methodNames[m]
	}
	return "method(" + strconv.Itoa(int(m)) + ")"
}

// ParseMethod returns the method of a configuration name.
func ParseMethod(s string) (Method, error) {
	for m, name := range methodNames {
		if name != "" && name == s {
			return Method(m), nil
		}
	}
	return 0, fmt.Errorf("unknown smoother %q (want max_likelihood, add_k, witten_bell, absolute, kneser_ney or modified_kneser_ney)", s)
}

// Smoothing selects a method and its parameters.
type Smoothing struct {
	Method Method

	// K is the pseudo-count of AddK, above 0. Zero means 1 (add-one).
	K float64

	// Discount is the fixed discount D of Absolute and KneserNey for every
	// order, from 0 to 1. Zero means estimating one discount an order from
	// its count-of-counts, D = n1/(n1+2·n2) (Ney, Essen & Kneser 1994).
	Discount float64

	// Discounts are fixed D1, D2 and D3+ of ModifiedKneserNey for every
	// order, with 0 <= Dk <= k. All zero means estimating them an order
	// from its count-of-counts (Chen & Goodman 1998).
	Discounts [3]float64

	// NoFloor makes the order-0 (unigram) estimate stand alone instead of
	// interpolating it with the uniform base distribution: tokens never
	// seen in training then get probability zero. It exists to reproduce
	// other implementations; weft's baselines keep the floor.
	NoFloor bool
}

// NGram is an n-gram language model fitted from Counts. It is safe for
// concurrent use.
type NGram struct {
	counts *Counts
	order  int
	sm     Smoothing
	// disc[d][r] is the discount of an event at depth d (context length)
	// whose count is r = 1, 2, 3+; index 0 unused.
	disc [MaxOrder][4]float64
}

// TrainingNote is the note of the counts the model reads
// (Counts.TrainingNote): "" when they cover the whole training split.
func (m *NGram) TrainingNote() string { return m.counts.TrainingNote() }

// NewNGram returns the n-gram model of the given order (1..c.Order())
// smoothed by s.
func NewNGram(c *Counts, order int, s Smoothing) (*NGram, error) {
	if order < 1 || order > c.order {
		return nil, fmt.Errorf("n-gram model: order %d outside 1..%d of the counts", order, c.order)
	}
	switch s.Method {
	case MaxLikelihood, WittenBell:
	case AddK:
		if s.K == 0 {
			s.K = 1
		}
		if !(s.K > 0) || math.IsInf(s.K, 0) {
			return nil, fmt.Errorf("n-gram model: add-k pseudo-count %g is not positive", s.K)
		}
	case Absolute, KneserNey:
		if !(s.Discount >= 0 && s.Discount <= 1) {
			return nil, fmt.Errorf("n-gram model: discount %g outside 0..1", s.Discount)
		}
	case ModifiedKneserNey:
		for k, d := range s.Discounts {
			if !(d >= 0 && d <= float64(k+1)) {
				return nil, fmt.Errorf("n-gram model: discount D%d = %g outside 0..%d", k+1, d, k+1)
			}
		}
	default:
		return nil, fmt.Errorf("n-gram model: unknown smoothing method %d", int(s.Method))
	}
	m := &NGram{counts: c, order: order, sm: s}
	for d := 0; d < order; d++ {
		coc := c.CountOfCounts(d+1, m.continuation(d))
		switch s.Method {
		case Absolute, KneserNey:
			D := s.Discount
			if D == 0 {
				D = AbsoluteDiscount(coc[0], coc[1])
			}
			m.disc[d] = [4]float64{0, D, D, D}
		case ModifiedKneserNey:
			D := s.Discounts
			if D == [3]float64{} {
				D = ModifiedDiscounts(coc)
			}
			m.disc[d] = [4]float64{0, D[0], D[1], D[2]}
		}
	}
	return m, nil
}

// AbsoluteDiscount is the discount estimate of Ney, Essen & Kneser (1994)
// from the numbers n1 and n2 of n-grams seen once and twice:
//
//	D = n1 / (n1 + 2·n2)
//
// When n1 is zero the estimate is undefined or zero and 0.5 is returned.
func AbsoluteDiscount(n1, n2 int) float64 {
	if n1 <= 0 {
		return 0.5
	}
	return float64(n1) / float64(n1+2*n2)
}

// ModifiedDiscounts are the discounts D1, D2, D3+ of modified Kneser-Ney
// from the count-of-counts n = (n1, n2, n3, n4), by Chen & Goodman (1998,
// Harvard TR-10-98):
//
//	Y   = n1 / (n1 + 2·n2)
//	D1  = 1 - 2·Y·n2/n1
//	D2  = 2 - 3·Y·n3/n2
//	D3+ = 3 - 4·Y·n4/n3
//
// When n1, n2 or n3 is zero the formulas are undefined and every discount
// falls back to min(k, AbsoluteDiscount(n1, n2)). Each Dk is clamped to
// 0..k so that no count goes negative.
func ModifiedDiscounts(n [4]int) [3]float64 {
	n1, n2, n3, n4 := float64(n[0]), float64(n[1]), float64(n[2]), float64(n[3])
	if n1 == 0 || n2 == 0 || n3 == 0 {
		d := AbsoluteDiscount(n[0], n[1])
		return [3]float64{min(1, d), min(2, d), min(3, d)}
	}
	y := n1 / (n1 + 2*n2)
	D := [3]float64{1 - 2*y*n2/n1, 2 - 3*y*n3/n2, 3 - 4*y*n4/n3}
	for k := range D {
		D[k] = max(0, min(float64(k+1), D[k]))
	}
	return D
}

// continuation reports whether depth d uses continuation counts: the lower
// orders of the Kneser-Ney methods do.
func (m *NGram) continuation(d int) bool {
	return (m.sm.Method == KneserNey || m.sm.Method == ModifiedKneserNey) && d < m.order-1
}

// Discounts returns the discounts D1, D2, D3+ used for the n-grams of the
// given order (1..Order); Absolute and KneserNey use one value for all
// three, the other methods none (zeros).
func (m *NGram) Discounts(order int) [3]float64 {
	d := m.disc[order-1]
	return [3]float64{d[1], d[2], d[3]}
}

// Name is a table label such as "5-gram kneser_ney" or "3-gram add_k(1)".
func (m *NGram) Name() string {
	return BaselineSpec{Kind: "ngram", Order: m.order, Method: m.sm.Method, K: m.sm.K}.String()
}

// Kind is "ngram".
func (m *NGram) Kind() string { return "ngram" }

// VocabSize is the number of token ids predicted.
func (m *NGram) VocabSize() int { return m.counts.vocab }

// Order is the model's n.
func (m *NGram) Order() int { return m.order }

// Smoothing returns the method and parameters, defaults filled in.
func (m *NGram) Smoothing() Smoothing { return m.sm }

// Counts returns the counts the model reads.
func (m *NGram) Counts() *Counts { return m.counts }

// prob returns P(w | h) given the context nodes ctxs[d] of the history's
// last d tokens, for d = 0..len(ctxs)-1 (the deeper ones are unseen).
func (m *NGram) prob(ctxs []int32, w int) float64 {
	c := m.counts
	V := float64(c.vocab)
	top := m.order - 1
	switch m.sm.Method {
	case MaxLikelihood:
		for d := len(ctxs) - 1; d >= 0; d-- {
			h := ctxs[d]
			if T := c.raw.total[h]; T > 0 {
				var n uint32
				if e := c.event(h, w); e >= 0 {
					n = c.evCount[e]
				}
				return float64(n) / float64(T)
			}
		}
		return 1 / V
	case AddK:
		var n, T float64
		if len(ctxs)-1 == top {
			h := ctxs[top]
			T = float64(c.raw.total[h])
			if e := c.event(h, w); e >= 0 {
				n = float64(c.evCount[e])
			}
		}
		return (n + m.sm.K) / (T + m.sm.K*V)
	}
	p := 1 / V
	for d, h := range ctxs {
		cont := m.continuation(d)
		st := &c.raw
		if cont {
			st = &c.cont
		}
		T := float64(st.total[h])
		if T == 0 {
			continue // no data for this context: defer to the shorter one
		}
		var n float64
		if e := c.event(h, w); e >= 0 {
			if cont {
				n = float64(c.evCont[e])
			} else {
				n = float64(c.evCount[e])
			}
		}
		if d == 0 && m.sm.NoFloor {
			p = n / T
			continue
		}
		// Types seen after h; equal to N1+(h •) under the counts used at
		// this depth (see Counts, Padding).
		types := float64(c.raw.distinct[h])
		switch m.sm.Method {
		case WittenBell:
			p = (n + types*p) / (T + types)
		case Absolute, KneserNey:
			D := m.disc[d][1]
			p = max(n-D, 0)/T + D*types/T*p
		case ModifiedKneserNey:
			D := &m.disc[d]
			r := min(int(n), 3)
			gamma := D[1]*float64(st.n1[h]) + D[2]*float64(st.n2[h]) + D[3]*float64(st.n3[h])
			p = (n-D[r])/T + gamma/T*p
		}
	}
	return p
}

// walk fills ctxs with the context nodes of the history whose latest
// tokens are hist[0], hist[1], ... and returns the found prefix.
func (m *NGram) walk(ctxs []int32, hist []int) []int32 {
	ctxs = append(ctxs[:0], 0)
	h := int32(0)
	for _, x := range hist[:m.order-1] {
		if h = m.counts.child(h, x); h < 0 {
			break
		}
		ctxs = append(ctxs, h)
	}
	return ctxs
}

// LogProbs writes ln P(seq[i] | seq[:i]) to dst[i]. A probability of zero
// (possible only with MaxLikelihood or NoFloor) gives -Inf. Long
// sequences are cut into pieces scored in parallel, each piece starting
// from the history the tokens before it leave, so the result does not
// depend on the cut.
func (m *NGram) LogProbs(ctx context.Context, dst []float64, seq []int) error {
	return m.LogProbsProgress(ctx, dst, seq, nil)
}

// LogProbsProgress is LogProbs reporting the tokens scored to progress
// (stage "score" and the model's name).
func (m *NGram) LogProbsProgress(ctx context.Context, dst []float64, seq []int, progress ProgressFunc) error {
	if len(dst) != len(seq) {
		panic("eval: LogProbs: len(dst) != len(seq)")
	}
	V := m.counts.vocab
	for i, w := range seq {
		if w < 0 || w >= V {
			return fmt.Errorf("%s: token %d at position %d outside 0..%d", m.Name(), w, i, V-1)
		}
	}
	const piece = 1 << 15
	pieces := (len(seq) + piece - 1) / piece
	workers := min(runtime.GOMAXPROCS(0), 4, pieces)
	stage := "score " + m.Name()
	var mu sync.Mutex
	done := 0
	report := func(n int) {
		if progress == nil {
			return
		}
		mu.Lock()
		defer mu.Unlock()
		done += n
		progress(stage, done, len(seq))
	}
	if workers <= 1 {
		for lo := 0; lo < len(seq); lo += piece {
			hi := min(len(seq), lo+piece)
			if err := m.logProbs(ctx, dst, seq, lo, hi); err != nil {
				return err
			}
			report(hi - lo)
		}
		return nil
	}
	var next atomic.Int64
	errs := make([]error, workers)
	var wg sync.WaitGroup
	for k := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				p := int(next.Add(1) - 1)
				if p >= pieces {
					return
				}
				lo, hi := p*piece, min(len(seq), (p+1)*piece)
				if err := m.logProbs(ctx, dst, seq, lo, hi); err != nil {
					errs[k] = err
					return
				}
				report(hi - lo)
			}
		}()
	}
	wg.Wait()
	return errors.Join(errs...)
}

// logProbs scores seq[lo:hi] into dst[lo:hi].
func (m *NGram) logProbs(ctx context.Context, dst []float64, seq []int, lo, hi int) error {
	hist, err := historyOf(seq[:lo], m.order-1, m.counts.vocab, m.counts.boundary)
	if err != nil {
		return err
	}
	ctxs := make([]int32, 0, m.order)
	for i := lo; i < hi; i++ {
		if (i-lo)%4096 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		w := seq[i]
		ctxs = m.walk(ctxs, hist.toks)
		dst[i] = math.Log(m.prob(ctxs, w))
		hist.push(w)
	}
	return nil
}

// Distribution writes P(w | history) to dst[w] for every token id w, with
// history read as a prefix of a LogProbs sequence.
func (m *NGram) Distribution(dst []float64, history []int) error {
	V := m.counts.vocab
	if len(dst) != V {
		panic("eval: Distribution: len(dst) != VocabSize()")
	}
	hist, err := historyOf(history, m.order-1, V, m.counts.boundary)
	if err != nil {
		return fmt.Errorf("%s: %w", m.Name(), err)
	}
	ctxs := m.walk(nil, hist.toks)
	for w := range dst {
		dst[w] = m.prob(ctxs, w)
	}
	return nil
}

// history is the last n tokens of a sequence, latest first, padded with the
// start-of-document symbol pad.
type history struct {
	toks          []int
	pad, boundary int
}

func newHistory(n, pad, boundary int) *history {
	h := &history{toks: make([]int, n), pad: pad, boundary: boundary}
	h.reset()
	return h
}

func (h *history) reset() {
	for i := range h.toks {
		h.toks[i] = h.pad
	}
}

func (h *history) push(w int) {
	if len(h.toks) == 0 {
		return
	}
	if w == h.boundary {
		h.reset()
		return
	}
	copy(h.toks[1:], h.toks[:len(h.toks)-1])
	h.toks[0] = w
}

// historyOf returns the history after the tokens seq.
func historyOf(seq []int, n, vocab, boundary int) (*history, error) {
	h := newHistory(n, vocab, boundary)
	start := max(0, len(seq)-n)
	for j := len(seq) - 1; j >= start; j-- {
		if seq[j] == boundary {
			start = j + 1
			break
		}
	}
	for j := start; j < len(seq); j++ {
		if seq[j] < 0 || seq[j] >= vocab {
			return nil, fmt.Errorf("history token %d at position %d outside 0..%d", seq[j], j, vocab-1)
		}
		h.push(seq[j])
	}
	return h, nil
}
