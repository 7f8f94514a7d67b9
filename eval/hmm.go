package eval

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
)

// MaxHMMStates is the largest number of hidden states accepted.
const MaxHMMStates = 4096

// HMM is a discrete hidden Markov model with N states over V symbols:
//
//	P(s_1 = i)           = π_i
//	P(s_t = j | s_t-1 = i) = a_ij
//	P(o_t = k | s_t = i)   = b_i(k)
//
// As a language model it predicts the next token from the filtered state
// distribution (the scaled forward algorithm, Rabiner 1989 §V.A), so all
// it remembers of the past fits in a state of log2 N bits (StateBits). A
// boundary token ends a document: the token after it starts again from π.
// It is safe for concurrent use except during training.
type HMM struct {
	n, v     int
	boundary int
	pi       []float64 // π_i
	a        []float64 // a[i*n+j] = a_ij
	bt       []float64 // bt[k*n+i] = b_i(k), symbol-major
	// floor is the emission floor ε and floorDist its distribution q over
	// the symbols: scoring uses (1-ε)·b_i(k) + ε·q(k), so that a symbol
	// the training tokens never showed keeps a probability (TrainHMM says
	// how ε and q are set).
	floor     float64
	floorDist []float64

	// LogLik holds the training log-likelihood in nats before each
	// Baum-Welch iteration and after the last one.
	LogLik []float64
}

// NewHMM returns the model with start probabilities pi (n), transitions a
// (n×n, row i the distribution after state i) and emissions b (n×v, row i
// the distribution of state i's symbols), all row-major. Rows must be
// distributions within 1e-9. The model has no boundary token and no
// emission floor.
func NewHMM(pi, a, b []float64, n, v int) (*HMM, error) {
	if n < 1 || v < 1 || len(pi) != n || len(a) != n*n || len(b) != n*v {
		return nil, fmt.Errorf("hmm: shapes π %d, a %d, b %d do not fit %d states and %d symbols", len(pi), len(a), len(b), n, v)
	}
	rows := [][]float64{pi}
	for i := range n {
		rows = append(rows, a[i*n:(i+1)*n], b[i*v:(i+1)*v])
	}
	for _, r := range rows {
		s := 0.0
		for _, p := range r {
			if !(p >= 0) {
				return nil, errors.New("hmm: negative or NaN probability")
			}
			s += p
		}
		if math.Abs(s-1) > 1e-9 {
			return nil, fmt.Errorf("hmm: a distribution sums to %g, not 1", s)
		}
	}
	h := &HMM{n: n, v: v, boundary: NoBoundary, floorDist: make([]float64, v)}
	h.pi = append([]float64(nil), pi...)
	h.a = append([]float64(nil), a...)
	h.bt = make([]float64, v*n)
	for i := range n {
		for k := range v {
			h.bt[k*n+i] = b[i*v+k]
		}
	}
	return h, nil
}

// States is N.
func (h *HMM) States() int { return h.n }

// VocabSize is V.
func (h *HMM) VocabSize() int { return h.v }

// StateBits is log2 N, the memory the model's state can hold.
func (h *HMM) StateBits() float64 { return math.Log2(float64(h.n)) }

// Name is "hmm-N".
func (h *HMM) Name() string { return BaselineSpec{Kind: "hmm", States: h.n}.String() }

// Kind is "hmm".
func (h *HMM) Kind() string { return "hmm" }

// Start is π_i.
func (h *HMM) Start(i int) float64 { return h.pi[i] }

// Transition is a_ij.
func (h *HMM) Transition(i, j int) float64 { return h.a[i*h.n+j] }

// Emission is b_i(k).
func (h *HMM) Emission(i, k int) float64 { return h.bt[k*h.n+i] }

func (h *HMM) checkObs(obs []int) error {
	for t, o := range obs {
		if o < 0 || o >= h.v {
			return fmt.Errorf("%s: symbol %d at position %d outside 0..%d", h.Name(), o, t, h.v-1)
		}
	}
	return nil
}

// Forward writes the unscaled forward trellis of obs to dst (len(obs)·N,
// dst[t*N+i] = α_t(i) = P(o_1..o_t, s_t = i)) and returns P(o_1..o_T) =
// Σ_i α_T(i) (Rabiner 1989, eq. 19-21). The values underflow on long
// sequences: it is meant for short ones; LogProbs scales. Boundary tokens
// and the emission floor are ignored.
func (h *HMM) Forward(dst []float64, obs []int) (float64, error) {
	n := h.n
	if len(dst) != len(obs)*n {
		panic("eval: Forward: len(dst) != len(obs)*States()")
	}
	if len(obs) == 0 {
		return 1, nil
	}
	if err := h.checkObs(obs); err != nil {
		return 0, err
	}
	for i := range n {
		dst[i] = h.pi[i] * h.bt[obs[0]*n+i]
	}
	for t := 1; t < len(obs); t++ {
		prev, cur := dst[(t-1)*n:t*n], dst[t*n:(t+1)*n]
		vecMat(cur, prev, h.a, n)
		b := h.bt[obs[t]*n : (obs[t]+1)*n]
		for j := range cur {
			cur[j] *= b[j]
		}
	}
	p := 0.0
	for _, x := range dst[(len(obs)-1)*n:] {
		p += x
	}
	return p, nil
}

// Viterbi returns the most probable state path for obs and the natural
// log of its joint probability with obs, max over paths of
// P(o_1..o_T, s_1..s_T) (Rabiner 1989, eq. 30-35, in log space). Ties go
// to the lower state. Boundary tokens and the emission floor are ignored.
func (h *HMM) Viterbi(obs []int) ([]int, float64, error) {
	if len(obs) == 0 {
		return nil, 0, nil
	}
	if err := h.checkObs(obs); err != nil {
		return nil, 0, err
	}
	n := h.n
	delta := make([]float64, n)
	next := make([]float64, n)
	back := make([]int32, len(obs)*n)
	for i := range n {
		delta[i] = math.Log(h.pi[i]) + math.Log(h.bt[obs[0]*n+i])
	}
	for t := 1; t < len(obs); t++ {
		for j := range n {
			best, arg := math.Inf(-1), 0
			for i := range n {
				if s := delta[i] + math.Log(h.a[i*n+j]); s > best {
					best, arg = s, i
				}
			}
			next[j] = best + math.Log(h.bt[obs[t]*n+j])
			back[t*n+j] = int32(arg)
		}
		delta, next = next, delta
	}
	best, arg := math.Inf(-1), 0
	for i, d := range delta {
		if d > best {
			best, arg = d, i
		}
	}
	path := make([]int, len(obs))
	path[len(obs)-1] = arg
	for t := len(obs) - 1; t > 0; t-- {
		path[t-1] = int(back[t*n+path[t]])
	}
	return path, best, nil
}

// Posteriors writes P(s_t = i | o_1..o_T) to dst[t*N+i] by the scaled
// forward-backward algorithm (Rabiner 1989, eq. 27) with the same
// conventions as Forward, and returns ln P(o_1..o_T).
func (h *HMM) Posteriors(dst []float64, obs []int) (float64, error) {
	n := h.n
	if len(dst) != len(obs)*n {
		panic("eval: Posteriors: len(dst) != len(obs)*States()")
	}
	if err := h.checkObs(obs); err != nil {
		return 0, err
	}
	acc := newBWAcc(n, h.v)
	fb := newFB(n, len(obs))
	ll := fb.run(h, obs, acc, dst)
	return ll, nil
}

// LogProbs writes ln P(seq[i] | seq[:i]) by the scaled forward algorithm
// with the emission floor, restarting from π after each boundary token.
func (h *HMM) LogProbs(ctx context.Context, dst []float64, seq []int) error {
	return h.LogProbsProgress(ctx, dst, seq, nil)
}

// LogProbsProgress is LogProbs reporting the tokens scored to progress
// (stage "score" and the model's name).
func (h *HMM) LogProbsProgress(ctx context.Context, dst []float64, seq []int, progress ProgressFunc) error {
	if len(dst) != len(seq) {
		panic("eval: LogProbs: len(dst) != len(seq)")
	}
	if err := h.checkObs(seq); err != nil {
		return err
	}
	n := h.n
	alpha := make([]float64, n)
	pred := make([]float64, n)
	start := true
	keep := 1 - h.floor
	for t, o := range seq {
		if t%1024 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
			if t%(1<<16) == 0 {
				progress.report("score "+h.Name(), t, len(seq))
			}
		}
		if start {
			copy(pred, h.pi)
		} else {
			vecMat(pred, alpha, h.a, n)
		}
		b := h.bt[o*n : (o+1)*n]
		eps := h.floor * h.floorDist[o]
		var p float64
		for i := range n {
			alpha[i] = pred[i] * (keep*b[i] + eps)
			p += alpha[i]
		}
		dst[t] = math.Log(p)
		if p > 0 {
			inv := 1 / p
			for i := range alpha {
				alpha[i] *= inv
			}
		}
		start = o == h.boundary
	}
	progress.report("score "+h.Name(), len(seq), len(seq))
	return nil
}

// Distribution writes P(w | history) for every symbol w.
func (h *HMM) Distribution(dst []float64, history []int) error {
	if len(dst) != h.v {
		panic("eval: Distribution: len(dst) != VocabSize()")
	}
	if err := h.checkObs(history); err != nil {
		return err
	}
	n := h.n
	pred := append([]float64(nil), h.pi...)
	alpha := make([]float64, n)
	keep := 1 - h.floor
	for _, o := range history {
		b := h.bt[o*n : (o+1)*n]
		eps := h.floor * h.floorDist[o]
		var p float64
		for i := range n {
			alpha[i] = pred[i] * (keep*b[i] + eps)
			p += alpha[i]
		}
		for i := range alpha {
			alpha[i] /= p
		}
		if o == h.boundary {
			copy(pred, h.pi)
		} else {
			vecMat(pred, alpha, h.a, n)
		}
	}
	for w := range dst {
		b := h.bt[w*n : (w+1)*n]
		eps := h.floor * h.floorDist[w]
		var p float64
		for i := range n {
			p += pred[i] * (keep*b[i] + eps)
		}
		dst[w] = p
	}
	return nil
}

// HMMOptions sets up TrainHMM.
type HMMOptions struct {
	// States is N, 2..MaxHMMStates.
	States int
	// MaxIterations caps the Baum-Welch iterations, at least 1.
	MaxIterations int
	// Tolerance stops training when an iteration raises the
	// log-likelihood by less than Tolerance·|log-likelihood|; zero runs
	// all MaxIterations.
	Tolerance float64
	// Seed seeds the initial parameters.
	Seed uint64
	// Boundary is the token id that ends a document, or NoBoundary (-1).
	// Mind the zero value: it makes token 0 the boundary.
	Boundary int
	// EmissionFloor is the weight δ of the add-one unigram distribution
	// mixed into every emission when scoring, over and above the weight
	// of the symbols the training tokens lack (see TrainHMM), in 0..1: it
	// keeps every symbol possible in every state. Training itself is plain
	// maximum likelihood. Zero means 1e-6; a negative value means none.
	EmissionFloor float64
	// Unigram is the count of each symbol 0..vocab-1 in the whole training
	// split (TokenCounts), when the model trains on a part of it; nil
	// means the counts of the training tokens given.
	Unigram []int
	// Threads is the number of goroutines sharing the transition counts,
	// at least 1. Zero means 2.
	Threads int
	// Progress hears about each iteration (stage "baum-welch").
	Progress ProgressFunc
}

// TrainHMM fits an HMM to the training tokens train (ids below vocab) by
// Baum-Welch (Baum et al. 1970; Rabiner 1989 §III.C), each document (the
// stretch up to and including a boundary token) an independent sequence.
//
// Initialisation, from a generator seeded by opts.Seed: π and every row
// of a are normalised draws of independent unit exponentials (flat
// Dirichlet draws); row i of b is the training unigram distribution with
// add-one, each symbol's weight times a unit exponential, normalised. The
// spread matters: states that start too alike (factors within 1..2, say)
// leave EM near the symmetric saddle for tens of iterations.
//
// Emission floor. Baum-Welch gives probability zero to every symbol its
// training tokens lack, and the model may be trained on a part of the
// training split (hmm_max_tokens). When scoring, every emission is
// interpolated with a unigram distribution (linear interpolation,
// Jelinek & Mercer 1980):
//
//	b'_i(k) = (1 - m - δ)·b_i(k) + m·u_S(k) + δ·u(k)
//	u(k)    = (c(k) + 1) / (T + V)          (add-one on the whole split)
//	m       = Σ_{k ∈ S} u(k),  u_S(k) = u(k)/m for k ∈ S, 0 otherwise
//
// where c(k) counts symbol k in the whole training split of T tokens
// (opts.Unigram), S is the set of symbols the HMM's own training tokens
// lack, and δ is opts.EmissionFloor. So a symbol the HMM never saw is
// predicted at about its unigram rate in the whole training split, in
// every state, rather than at a token probability of δ/V; m is the share
// of the (add-one) training split taken up by such symbols, the rate at
// which the model would meet one if it read the whole split. This rule is
// weft's own; each b'_i sums to 1.
//
// Each iteration runs the scaled forward-backward algorithm over every
// document. It keeps the scaled forward vectors only at every 256th
// position and recomputes them a block at a time in the backward sweep, so
// memory is O(N·256 + T) whatever T, for about 8·N²·T floating-point
// operations an iteration: 2·N²·T for each of the forward pass, its
// recomputation, the backward pass and the expected transition counts.
func TrainHMM(ctx context.Context, train []int, vocab int, opts HMMOptions) (*HMM, error) {
	n := opts.States
	if n < 2 || n > MaxHMMStates {
		return nil, fmt.Errorf("hmm: %d states outside 2..%d", n, MaxHMMStates)
	}
	if opts.MaxIterations < 1 {
		return nil, fmt.Errorf("hmm: %d iterations, want at least 1", opts.MaxIterations)
	}
	if vocab < 1 || len(train) == 0 {
		return nil, errors.New("hmm: no training tokens")
	}
	if opts.Boundary < NoBoundary || opts.Boundary >= vocab {
		return nil, fmt.Errorf("hmm: boundary token %d outside 0..%d", opts.Boundary, vocab-1)
	}
	floor := opts.EmissionFloor
	switch {
	case floor == 0:
		floor = 1e-6
	case floor < 0:
		floor = 0
	case floor > 1:
		return nil, fmt.Errorf("hmm: emission floor %g above 1", floor)
	}
	h := &HMM{n: n, v: vocab, boundary: opts.Boundary}
	for i, o := range train {
		if o < 0 || o >= vocab {
			return nil, fmt.Errorf("hmm: token %d at position %d outside 0..%d", o, i, vocab-1)
		}
	}
	if opts.Unigram != nil && len(opts.Unigram) != vocab {
		return nil, fmt.Errorf("hmm: %d unigram counts for %d symbols", len(opts.Unigram), vocab)
	}
	h.setFloor(train, opts.Unigram, floor)
	h.initRandom(train, opts.Seed)
	prev := math.Inf(-1)
	for it := range opts.MaxIterations {
		opts.Progress.report("baum-welch", it, opts.MaxIterations)
		ll, err := h.Iterate(ctx, train, opts.Threads)
		if err != nil {
			return nil, err
		}
		if opts.Tolerance > 0 && it > 0 && ll-prev < opts.Tolerance*math.Abs(ll) {
			break
		}
		prev = ll
	}
	final, err := h.logLikelihood(ctx, train)
	if err != nil {
		return nil, err
	}
	h.LogLik = append(h.LogLik, final)
	opts.Progress.report("baum-welch", opts.MaxIterations, opts.MaxIterations)
	return h, nil
}

// setFloor sets the emission floor as TrainHMM documents: delta is δ,
// unigram the whole training split's counts (nil: those of train).
func (h *HMM) setFloor(train []int, unigram []int, delta float64) {
	seen := TokenCounts(train, h.v)
	if unigram == nil {
		unigram = seen
	}
	total := 0
	for _, c := range unigram {
		total += c
	}
	u := make([]float64, h.v)
	m := 0.0
	for k, c := range unigram {
		u[k] = float64(c+1) / float64(total+h.v)
		if seen[k] == 0 {
			m += u[k]
		}
	}
	// f(k) = m·u_S(k) + δ·u(k) = (1[k ∈ S] + δ)·u(k), of total mass m + δ.
	h.floor = m + delta
	h.floorDist = make([]float64, h.v)
	if h.floor == 0 {
		return
	}
	for k := range u {
		w := delta
		if seen[k] == 0 {
			w++
		}
		h.floorDist[k] = w * u[k] / h.floor
	}
}

func (h *HMM) initRandom(train []int, seed uint64) {
	n, v := h.n, h.v
	rng := rand.New(rand.NewPCG(seed, 0x51ed_27a0_b3c4_9d11))
	h.pi = make([]float64, n)
	h.a = make([]float64, n*n)
	h.bt = make([]float64, v*n)
	randRow := func(dst []float64, base func(k int) float64) {
		s := 0.0
		for k := range dst {
			dst[k] = base(k) * rng.ExpFloat64()
			s += dst[k]
		}
		for k := range dst {
			dst[k] /= s
		}
	}
	one := func(int) float64 { return 1 }
	randRow(h.pi, one)
	for i := range n {
		randRow(h.a[i*n:(i+1)*n], one)
	}
	freq := TokenCounts(train, v)
	row := make([]float64, v)
	for i := range n {
		randRow(row, func(k int) float64 { return float64(freq[k] + 1) })
		for k := range v {
			h.bt[k*n+i] = row[k]
		}
	}
}

// segments calls f for every document of seq.
func (h *HMM) segments(seq []int, f func(seg []int) error) error {
	start := 0
	for t, o := range seq {
		if o == h.boundary {
			if err := f(seq[start : t+1]); err != nil {
				return err
			}
			start = t + 1
		}
	}
	if start < len(seq) {
		return f(seq[start:])
	}
	return nil
}

func (h *HMM) logLikelihood(ctx context.Context, seq []int) (float64, error) {
	lp := make([]float64, len(seq))
	saved := h.floor
	h.floor = 0
	err := h.LogProbs(ctx, lp, seq)
	h.floor = saved
	var s float64
	for _, x := range lp {
		s += x
	}
	return s, err
}

// Iterate runs one Baum-Welch iteration on seq (re-estimating π, a and b
// in place) with the given number of goroutines (zero: 2) and returns the
// log-likelihood in nats of seq under the parameters before the update,
// which it also appends to LogLik. By the EM property (Dempster, Laird &
// Rubin 1977) the next iteration's value is never lower.
func (h *HMM) Iterate(ctx context.Context, seq []int, threads int) (float64, error) {
	if threads <= 0 {
		threads = 2
	}
	if err := h.checkObs(seq); err != nil {
		return 0, err
	}
	n, v := h.n, h.v
	acc := newBWAcc(n, v)
	acc.threads = threads
	var fb *fbWork
	ll := 0.0
	err := h.segments(seq, func(seg []int) error {
		if err := ctx.Err(); err != nil {
			return err
		}
		if fb == nil || cap(fb.scale) < len(seg) {
			fb = newFB(n, len(seg))
		}
		ll += fb.run(h, seg, acc, nil)
		return nil
	})
	if err != nil {
		return 0, err
	}
	h.LogLik = append(h.LogLik, ll)
	h.mstep(acc)
	return ll, nil
}

// mstep sets the parameters to the normalised expected counts; a state
// never visited keeps its rows.
func (h *HMM) mstep(acc *bwAcc) {
	n, v := h.n, h.v
	if s := sum(acc.pi); s > 0 {
		for i := range n {
			h.pi[i] = acc.pi[i] / s
		}
	}
	for i := range n {
		row := acc.x[i*n : (i+1)*n]
		arow := h.a[i*n : (i+1)*n]
		s := 0.0
		for j := range row {
			row[j] *= arow[j] // expected transitions a_ij·Σ_t α̂_t(i)·u_t+1(j)
			s += row[j]
		}
		if s > 0 {
			for j := range row {
				arow[j] = row[j] / s
			}
		}
	}
	for i := range n {
		if acc.gamma[i] <= 0 {
			continue
		}
		inv := 1 / acc.gamma[i]
		for k := range v {
			h.bt[k*n+i] = acc.b[k*n+i] * inv
		}
	}
}

func sum(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s
}

// bwAcc holds the expected counts of one Baum-Welch iteration.
type bwAcc struct {
	n, v    int
	threads int
	pi      []float64 // Σ over documents of γ_1(i)
	x       []float64 // x[i*n+j] = Σ_t α̂_t(i)·u_t+1(j)
	b       []float64 // b[k*n+i] = Σ_{t: o_t=k} γ_t(i)
	gamma   []float64 // Σ_t γ_t(i)
}

func newBWAcc(n, v int) *bwAcc {
	return &bwAcc{n: n, v: v, threads: 1,
		pi: make([]float64, n), x: make([]float64, n*n),
		b: make([]float64, v*n), gamma: make([]float64, n)}
}

// fbBlock is the number of positions between stored forward vectors.
const fbBlock = 256

// fbWork is the scratch space of one scaled forward-backward pass.
type fbWork struct {
	n      int
	scale  []float64 // c_t, the forward scale factors
	ckpt   []float64 // α̂ at the start of every block
	alpha  []float64 // α̂_t of a block, position-major
	alpha2 []float64 // the same for the block before, computed ahead
	u      []float64 // u_t(j) = b_j(o_t)·β̂_t(j)/c_t of the current block
	beta   []float64
	tmp    []float64
}

func newFB(n, T int) *fbWork {
	return &fbWork{n: n,
		scale: make([]float64, T),
		ckpt:  make([]float64, ((T+fbBlock-1)/fbBlock)*n),
		alpha: make([]float64, fbBlock*n), alpha2: make([]float64, fbBlock*n), u: make([]float64, (fbBlock+1)*n),
		beta: make([]float64, n), tmp: make([]float64, n)}
}

// forwardStep computes α̂_t from α̂_t-1 (prev, or π when prev is nil) and
// returns c_t = Σ_j (prev·A)_j·b_j(o).
func (h *HMM) forwardStep(cur, prev []float64, o int) float64 {
	n := h.n
	if prev == nil {
		copy(cur, h.pi)
	} else {
		vecMat(cur, prev, h.a, n)
	}
	b := h.bt[o*n : (o+1)*n]
	c := 0.0
	for j := range cur {
		cur[j] *= b[j]
		c += cur[j]
	}
	if c > 0 {
		inv := 1 / c
		for j := range cur {
			cur[j] *= inv
		}
	}
	return c
}

// run does forward-backward on one document, adds the expected counts to
// acc, writes the posteriors γ_t to post when it is not nil, and returns
// ln P(obs).
func (fb *fbWork) run(h *HMM, obs []int, acc *bwAcc, post []float64) float64 {
	n, T := h.n, len(obs)
	if T == 0 {
		return 0
	}
	scale := fb.scale[:T]
	// Forward pass, keeping the first vector of every block.
	cur, prev := fb.beta, fb.tmp
	ll := 0.0
	for t, o := range obs {
		var p []float64
		if t > 0 {
			p = prev
		}
		scale[t] = h.forwardStep(cur, p, o)
		ll += math.Log(scale[t])
		if t%fbBlock == 0 {
			copy(fb.ckpt[(t/fbBlock)*n:], cur)
		}
		cur, prev = prev, cur
	}
	if math.IsInf(ll, -1) {
		return ll // impossible under the model: nothing to learn
	}
	// Backward sweep, a block at a time from the last. The forward vectors
	// of a block are recomputed from its checkpoint into one of two
	// buffers; with more than one thread, the block before is recomputed
	// on another goroutine while this one is swept.
	beta := fb.beta
	for i := range beta {
		beta[i] = 1
	}
	nb := (T + fbBlock - 1) / fbBlock
	bufs := [2][]float64{fb.alpha, fb.alpha2}
	recompute := func(blk int) {
		buf := bufs[blk%2]
		t0 := blk * fbBlock
		t1 := min(T, t0+fbBlock)
		copy(buf[:n], fb.ckpt[blk*n:(blk+1)*n])
		for t := t0 + 1; t < t1; t++ {
			h.forwardStep(buf[(t-t0)*n:(t-t0+1)*n], buf[(t-t0-1)*n:(t-t0)*n], obs[t])
		}
	}
	recompute(nb - 1)
	for blk := nb - 1; blk >= 0; blk-- {
		t0 := blk * fbBlock
		t1 := min(T, t0+fbBlock)
		L := t1 - t0
		alpha := bufs[blk%2]
		var wg sync.WaitGroup
		ahead := blk > 0 && acc.threads > 1
		if ahead {
			wg.Add(1)
			go func() {
				defer wg.Done()
				recompute(blk - 1)
			}()
		}
		// fb.u[L*n:] holds u_t1 from the previous (later) block.
		for t := t1 - 1; t >= t0; t-- {
			k := t - t0
			if t < T-1 {
				matVec(beta, h.a, fb.u[(k+1)*n:(k+2)*n], n) // β̂_t = A·u_t+1
			}
			a := alpha[k*n : (k+1)*n]
			o := obs[t]
			b := h.bt[o*n : (o+1)*n]
			bacc := acc.b[o*n : (o+1)*n]
			inv := 1 / scale[t]
			u := fb.u[k*n : (k+1)*n]
			for i := range n {
				g := a[i] * beta[i]
				bacc[i] += g
				acc.gamma[i] += g
				u[i] = b[i] * beta[i] * inv
			}
			if post != nil {
				for i := range n {
					post[t*n+i] = a[i] * beta[i]
				}
			}
			if t == 0 {
				for i := range n {
					acc.pi[i] += a[i] * beta[i]
				}
			}
		}
		// Expected transitions between positions t and t+1 of the block
		// (the last position pairs with u_t1 of the next block).
		pairs := L
		if t1 == T {
			pairs = L - 1
		}
		wg.Wait()
		if pairs > 0 {
			gemmTN(acc.x, alpha[:pairs*n], fb.u[n:(pairs+1)*n], n, pairs, acc.threads)
		}
		if blk > 0 && !ahead {
			recompute(blk - 1)
		}
		// The earlier block (always full) reads u_t0 at its index L.
		copy(fb.u[fbBlock*n:(fbBlock+1)*n], fb.u[:n])
	}
	return ll
}

// vecMat sets dst[j] = Σ_i x[i]·m[i*n+j], four rows of m at a time.
func vecMat(dst, x, m []float64, n int) {
	dst = dst[:n]
	clear(dst)
	i := 0
	for ; i+4 <= len(x); i += 4 {
		x0, x1, x2, x3 := x[i], x[i+1], x[i+2], x[i+3]
		r0 := m[i*n : (i+1)*n]
		r1 := m[(i+1)*n : (i+2)*n]
		r2 := m[(i+2)*n : (i+3)*n]
		r3 := m[(i+3)*n : (i+4)*n]
		for j := range dst {
			dst[j] += x0*r0[j] + x1*r1[j] + x2*r2[j] + x3*r3[j]
		}
	}
	for ; i < len(x); i++ {
		axpy(dst, x[i], m[i*n:(i+1)*n])
	}
}

func axpy(dst []float64, a float64, x []float64) {
	x = x[:len(dst)]
	for j := range dst {
		dst[j] += a * x[j]
	}
}

// matVec sets dst[i] = Σ_j m[i*n+j]·x[j], four rows of m at a time.
func matVec(dst, m, x []float64, n int) {
	x = x[:n]
	i := 0
	for ; i+4 <= len(dst); i += 4 {
		r0 := m[i*n : (i+1)*n]
		r1 := m[(i+1)*n : (i+2)*n]
		r2 := m[(i+2)*n : (i+3)*n]
		r3 := m[(i+3)*n : (i+4)*n]
		var s0, s1, s2, s3 float64
		for j, xj := range x {
			s0 += r0[j] * xj
			s1 += r1[j] * xj
			s2 += r2[j] * xj
			s3 += r3[j] * xj
		}
		dst[i], dst[i+1], dst[i+2], dst[i+3] = s0, s1, s2, s3
	}
	for ; i < len(dst); i++ {
		dst[i] = dot(m[i*n:(i+1)*n], x)
	}
}

func dot(a, b []float64) float64 {
	b = b[:len(a)]
	var s0, s1, s2, s3 float64
	j := 0
	for ; j+4 <= len(a); j += 4 {
		x := a[j : j+4 : j+4]
		y := b[j : j+4 : j+4]
		s0 += x[0] * y[0]
		s1 += x[1] * y[1]
		s2 += x[2] * y[2]
		s3 += x[3] * y[3]
	}
	for ; j < len(a); j++ {
		s0 += a[j] * b[j]
	}
	return (s0 + s1) + (s2 + s3)
}

// gemmTN adds aᵀ·b to c, with a and b both k×n row-major (k positions
// of n states) and c n×n, in 4×4 register tiles, the rows of c split over
// threads goroutines.
func gemmTN(c, a, b []float64, n, k, threads int) {
	if threads <= 1 || n < 32 {
		gemmTNRows(c, a, b, n, k, 0, n)
		return
	}
	var wg sync.WaitGroup
	step := (n/threads + 3) &^ 3
	for lo := 0; lo < n; lo += step {
		hi := min(n, lo+step)
		wg.Add(1)
		go func() {
			defer wg.Done()
			gemmTNRows(c, a, b, n, k, lo, hi)
		}()
	}
	wg.Wait()
}

func gemmTNRows(c, a, b []float64, n, k, lo, hi int) {
	a, b = a[:k*n], b[:k*n]
	i := lo
	for ; i+4 <= hi; i += 4 {
		j := 0
		for ; j+4 <= n; j += 4 {
			var c00, c01, c02, c03, c10, c11, c12, c13, c20, c21, c22, c23, c30, c31, c32, c33 float64
			for t := 0; t < k*n; t += n {
				x := a[t+i : t+i+4 : t+i+4]
				y := b[t+j : t+j+4 : t+j+4]
				x0, x1, x2, x3 := x[0], x[1], x[2], x[3]
				y0, y1, y2, y3 := y[0], y[1], y[2], y[3]
				c00 += x0 * y0
				c01 += x0 * y1
				c02 += x0 * y2
				c03 += x0 * y3
				c10 += x1 * y0
				c11 += x1 * y1
				c12 += x1 * y2
				c13 += x1 * y3
				c20 += x2 * y0
				c21 += x2 * y1
				c22 += x2 * y2
				c23 += x2 * y3
				c30 += x3 * y0
				c31 += x3 * y1
				c32 += x3 * y2
				c33 += x3 * y3
			}
			r0 := c[i*n+j : i*n+j+4 : i*n+j+4]
			r1 := c[(i+1)*n+j : (i+1)*n+j+4 : (i+1)*n+j+4]
			r2 := c[(i+2)*n+j : (i+2)*n+j+4 : (i+2)*n+j+4]
			r3 := c[(i+3)*n+j : (i+3)*n+j+4 : (i+3)*n+j+4]
			r0[0] += c00
			r0[1] += c01
			r0[2] += c02
			r0[3] += c03
			r1[0] += c10
			r1[1] += c11
			r1[2] += c12
			r1[3] += c13
			r2[0] += c20
			r2[1] += c21
			r2[2] += c22
			r2[3] += c23
			r3[0] += c30
			r3[1] += c31
			r3[2] += c32
			r3[3] += c33
		}
		for ; j < n; j++ {
			for r := i; r < i+4; r++ {
				gemmTNOne(c, a, b, n, k, r, j)
			}
		}
	}
	for ; i < hi; i++ {
		for j := range n {
			gemmTNOne(c, a, b, n, k, i, j)
		}
	}
}

func gemmTNOne(c, a, b []float64, n, k, i, j int) {
	var s float64
	for t := range k {
		s += a[t*n+i] * b[t*n+j]
	}
	c[i*n+j] += s
}
