package rnn

import (
	"container/heap"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// Decoding: drawing continuations from a model through a Stream.
//
// A Sampler turns one next-token distribution into one token under a
// Sampling setting (temperature, top-k, nucleus); Generate runs a Stream of
// one hypothesis token by token with a Sampler; BeamSearch keeps the Width
// most probable continuations instead of drawing. Randomness comes only from
// the *rand.Rand the caller gives, so a seeded PCG or ChaCha8 generator
// gives the same tokens on every run and with every thread count (the
// model's arithmetic does not depend on the thread count; see linalg.Gemm).
// Machines whose matrix kernels differ (fused multiply-adds or not) can
// differ in the last bits of a log-probability; a draw changes only when
// its uniform variate falls within that rounding of a boundary between two
// tokens, which is rare but possible.

// Sampling says how a Sampler chooses the next token from a distribution
// P(j), given as natural-log probabilities. The steps apply in this order
// (the order most decoders use, common practice):
//
//  1. temperature τ: q(j) ∝ P(j)^(1/τ), that is softmax(ln P / τ);
//  2. top-k: keep the k tokens of largest q (ties broken by lower id);
//  3. nucleus (Holtzman, Buys, Du, Forbes & Choi 2020, "The Curious Case of
//     Neural Text Degeneration", §3.1): keep the smallest set of the
//     remaining tokens, taken in order of decreasing q, whose total
//     renormalized probability reaches top_p;
//
// then draw from q renormalized over what is kept.
type Sampling struct {
	// Temperature τ divides the log-probabilities before the draw: below 1
	// sharpens the distribution, above 1 flattens it. Zero means greedy
	// decoding: always the most probable token (the lowest id among equals),
	// with no random draw. Default 1.
	Temperature float64

	// TopK keeps only the k most probable tokens. Zero means no limit.
	// Default 0.
	TopK int

	// TopP keeps the nucleus: the smallest set of most probable tokens whose
	// probability reaches top_p, from above 0 to 1. Zero or 1 means no
	// nucleus. Default 0.
	TopP float64
}

// DefaultSampling returns the defaults documented on Sampling: plain
// draws from the model's distribution.
func DefaultSampling() Sampling { return Sampling{Temperature: 1} }

// Validate reports the first field of c out of range.
func (c Sampling) Validate() error {
	switch {
	case math.IsNaN(c.Temperature) || math.IsInf(c.Temperature, 0) || c.Temperature < 0:
		return fmt.Errorf("temperature must be 0 (greedy) or more, got %v", c.Temperature)
	case c.TopK < 0:
		return fmt.Errorf("top-k must be 0 (no limit) or more, got %d", c.TopK)
	case math.IsNaN(c.TopP) || c.TopP < 0 || c.TopP > 1:
		return fmt.Errorf("top-p must be from 0 to 1, got %v", c.TopP)
	}
	return nil
}

// Greedy reports whether c never draws at random: temperature 0, or
// top-k 1.
func (c Sampling) Greedy() bool { return c.Temperature == 0 || c.TopK == 1 }

// A Sampler draws tokens under one Sampling setting from one generator.
// It reuses its buffers: Draw allocates nothing. It is not safe for
// concurrent use.
type Sampler struct {
	cfg  Sampling
	rng  *rand.Rand
	idx  []int // a heap of token ids
	kept []int // the ids taken from it, in order
	w    []float64
}

// NewSampler returns a sampler drawing with rng, which may be nil only
// when cfg is greedy.
func NewSampler(cfg Sampling, rng *rand.Rand) (*Sampler, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if rng == nil && !cfg.Greedy() {
		return nil, fmt.Errorf("sampling at temperature %v needs a random generator", cfg.Temperature)
	}
	return &Sampler{cfg: cfg, rng: rng}, nil
}

// Config returns the sampler's setting.
func (s *Sampler) Config() Sampling { return s.cfg }

// Draw returns one token id drawn from the distribution logp (natural-log
// probabilities over the vocabulary, as Stream.LogProbs writes them) under
// the sampler's setting. A greedy setting returns the argmax without using
// the generator; otherwise Draw uses exactly one rng.Float64 per call.
func (s *Sampler) Draw(logp []float64) int {
	if len(logp) == 0 {
		panic("rnn: Sampler.Draw of an empty distribution")
	}
	c := s.cfg
	if c.Greedy() {
		return argmax(logp)
	}
	V := len(logp)
	if cap(s.idx) < V {
		s.idx = make([]int, V)
		s.w = make([]float64, V)
		s.kept = make([]int, 0, V)
	}
	idx := s.idx[:V]
	for j := range idx {
		idx[j] = j
	}
	mx := math.Inf(-1)
	for _, l := range logp {
		mx = math.Max(mx, l)
	}
	invT := 1 / c.Temperature
	topK := c.TopK > 0 && c.TopK < V
	topP := c.TopP > 0 && c.TopP < 1
	var w []float64
	var total float64
	switch {
	case !topK && !topP:
		w = s.w[:V]
		for j, l := range logp {
			w[j] = math.Exp((l - mx) * invT)
			total += w[j]
		}
	case topK:
		// The k most probable, taken in decreasing probability (lower id
		// first among equals) from a heap: O(V + k log V).
		idx = s.takeTop(logp, c.TopK, -1)
		w = s.w[:len(idx)]
		for i, j := range idx {
			w[i] = math.Exp((logp[j] - mx) * invT)
			total += w[i]
		}
	default:
		// The nucleus alone: the total over every token, then the most
		// probable ones in order until they reach top_p of it.
		for _, l := range logp {
			total += math.Exp((l - mx) * invT)
		}
		idx = s.takeTop(logp, V, c.TopP*total)
		w = s.w[:len(idx)]
		total = 0
		for i, j := range idx {
			w[i] = math.Exp((logp[j] - mx) * invT)
			total += w[i]
		}
		topP = false // done
	}
	if topP {
		target := c.TopP * total
		var cum float64
		for i := range w {
			cum += w[i]
			if cum >= target {
				idx, w, total = idx[:i+1], w[:i+1], cum
				break
			}
		}
	}
	u := s.rng.Float64() * total
	for i := range w {
		u -= w[i]
		if u < 0 && w[i] > 0 {
			return idx[i]
		}
	}
	// Rounding left u ≥ 0 after the last weight: the last token with
	// positive weight.
	for i := len(w) - 1; i > 0; i-- {
		if w[i] > 0 {
			return idx[i]
		}
	}
	return idx[0]
}

// takeTop returns up to k token ids of logp in decreasing probability,
// lower id first among equals, popped from a max-heap built in s.idx.
// With mass > 0 it stops as soon as the tempered weights exp((logp−max)/τ)
// of the ids taken reach mass.
func (s *Sampler) takeTop(logp []float64, k int, mass float64) []int {
	h := s.idx[:len(logp)]
	before := func(a, b int) bool { // a ranks before b
		if logp[a] != logp[b] {
			return logp[a] > logp[b]
		}
		return a < b
	}
	down := func(i, n int) {
		for {
			l := 2*i + 1
			if l >= n {
				return
			}
			best := l
			if r := l + 1; r < n && before(h[r], h[l]) {
				best = r
			}
			if !before(h[best], h[i]) {
				return
			}
			h[i], h[best] = h[best], h[i]
			i = best
		}
	}
	n := len(h)
	for i := n/2 - 1; i >= 0; i-- {
		down(i, n)
	}
	mx := logp[h[0]]
	invT := 1 / s.cfg.Temperature
	out := s.kept[:0]
	var cum float64
	for len(out) < k && n > 0 {
		j := h[0]
		out = append(out, j)
		n--
		h[0] = h[n]
		down(0, n)
		if mass > 0 {
			if cum += math.Exp((logp[j] - mx) * invT); cum >= mass {
				break
			}
		}
	}
	s.kept = out
	return out
}

// argmax returns the index of the largest value, the lowest among equals.
func argmax(v []float64) int {
	best := 0
	for j, x := range v {
		if x > v[best] {
			best = j
		}
	}
	return best
}

// Token is one generated token: its id and its log-probability under the
// model, ln P(id | history) in nats, before any temperature or truncation
// (the probability the model itself gives the text, the one scoring uses).
type Token struct {
	ID      int
	LogProb float64
}

// Prime feeds prompt to every hypothesis of s, one token at a time, and
// checks ctx every 64 tokens.
func Prime[T Float](ctx context.Context, s *Stream[T], prompt []int) error {
	toks := make([]int, s.Len())
	for i, tok := range prompt {
		if i%64 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		for k := range toks {
			toks[k] = tok
		}
		if err := s.Feed(toks); err != nil {
			return fmt.Errorf("prompt position %d: %w", i, err)
		}
	}
	return nil
}

// Generate continues the single hypothesis of s (Len() must be 1) by up to
// maxTokens tokens drawn by sp. After each draw it calls emit with the
// token; emit returns true to end the continuation there (at a boundary
// symbol, a stop string or a length in characters), and the token is then
// not fed to s. An error from emit or ctx ends Generate with that error.
// It returns the number of tokens emitted. Apart from emit, Generate
// allocates nothing per token.
func Generate[T Float](ctx context.Context, s *Stream[T], sp *Sampler, maxTokens int, emit func(Token) (stop bool, err error)) (int, error) {
	if s.Len() != 1 {
		panic(fmt.Sprintf("rnn: Generate needs a stream of 1 hypothesis, got %d", s.Len()))
	}
	dist := make([]float64, s.m.vocab)
	tok := []int{0}
	for n := 0; n < maxTokens; n++ {
		if err := ctx.Err(); err != nil {
			return n, err
		}
		s.LogProbs(dist)
		id := sp.Draw(dist)
		stop, err := emit(Token{ID: id, LogProb: dist[id]})
		if err != nil {
			return n + 1, err
		}
		if stop {
			return n + 1, nil
		}
		if n+1 < maxTokens {
			tok[0] = id
			if err := s.Feed(tok); err != nil {
				return n + 1, err
			}
		}
	}
	return maxTokens, nil
}

// BeamConfig says how BeamSearch searches.
type BeamConfig struct {
	// Width is the number of hypotheses kept after each step, 1 or more.
	// Width 1 is greedy decoding.
	Width int

	// MaxTokens is the most tokens a continuation gets, 1 or more.
	MaxTokens int

	// End is the id of a token that ends a continuation when it is
	// generated (the boundary symbol), or -1 for none. The end token is
	// part of the finished continuation and of its log-probability.
	End int

	// Chars, when not nil, gives the number of characters of a token's
	// text, and a continuation ends as soon as its characters reach
	// MaxChars (when MaxChars > 0).
	Chars    func(id int) int
	MaxChars int
}

// Hypothesis is one continuation found by BeamSearch.
type Hypothesis struct {
	Tokens []Token
	// LogProb is Σ Tokens[i].LogProb, in nats.
	LogProb float64
	// Ended says the continuation ended at the End token or reached
	// MaxChars, rather than running out of MaxTokens.
	Ended bool
}

// BeamSearch continues prompt by the most probable continuations it can
// find, keeping the cfg.Width best partial continuations by total
// log-probability after every step (beam search; see e.g. Graves 2012,
// "Sequence Transduction with Recurrent Neural Networks", §2.4, or
// Jurafsky & Martin, "Speech and Language Processing", 3rd ed., §10.4).
// A continuation that ends (at cfg.End or cfg.MaxChars) stays in the beam
// with its score and competes with the longer ones; the search stops when
// every kept continuation has ended or after cfg.MaxTokens steps. It
// returns the final beam, most probable first (ties: the one found
// first). Scores are raw sums of log-probabilities, so shorter ended
// continuations are not penalised. Beam search is not exhaustive: a wider
// beam can return a less probable best continuation than a narrower one.
// With a width at least the number of distinct continuations it is exact.
func BeamSearch[T Float](ctx context.Context, m *Model[T], prompt []int, cfg BeamConfig) ([]Hypothesis, error) {
	if cfg.Width < 1 {
		return nil, fmt.Errorf("beam width must be at least 1, got %d", cfg.Width)
	}
	if cfg.MaxTokens < 1 {
		return nil, fmt.Errorf("beam search needs at least 1 token, got %d", cfg.MaxTokens)
	}
	W, V := cfg.Width, m.vocab
	s := m.NewStream(W)
	if err := Prime(ctx, s, prompt); err != nil {
		return nil, err
	}
	type node struct {
		tok    Token
		parent *node
	}
	type entry struct {
		score float64
		ended bool
		chars int
		last  *node
		order int // rank in the previous beam, for ties
	}
	beam := []entry{{}}
	dist := make([]float64, W*V)
	cands := &candHeap{}
	from := make([]int, W)
	feed := make([]int, W)
	for step := 0; step < cfg.MaxTokens; step++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		live := false
		for _, e := range beam {
			live = live || !e.ended
		}
		if !live {
			break
		}
		s.LogProbs(dist)
		cands.items = cands.items[:0]
		for i, e := range beam {
			if e.ended {
				cands.offer(W, cand{score: e.score, entry: i, tok: -1})
				continue
			}
			row := dist[i*V : (i+1)*V]
			for j, lp := range row {
				cands.offer(W, cand{score: e.score + lp, entry: i, tok: j})
			}
		}
		picked := slices.Clone(cands.items)
		slices.SortFunc(picked, func(a, b cand) int { return b.cmp(a) })
		next := make([]entry, len(picked))
		for k, c := range picked {
			e := beam[c.entry]
			from[k], feed[k] = c.entry, 0
			if c.tok < 0 {
				next[k] = e
				continue
			}
			lp := dist[c.entry*V+c.tok]
			n := entry{score: c.score, chars: e.chars, last: &node{Token{c.tok, lp}, e.last}}
			if cfg.Chars != nil {
				n.chars += cfg.Chars(c.tok)
			}
			n.ended = c.tok == cfg.End || (cfg.Chars != nil && cfg.MaxChars > 0 && n.chars >= cfg.MaxChars)
			next[k] = n
			feed[k] = c.tok
		}
		for k := len(picked); k < W; k++ {
			from[k], feed[k] = 0, 0
		}
		for k := range next {
			next[k].order = k
		}
		beam = next
		if step+1 < cfg.MaxTokens {
			if err := s.Select(from); err != nil {
				return nil, err
			}
			if err := s.Feed(feed); err != nil {
				return nil, err
			}
		}
	}
	out := make([]Hypothesis, len(beam))
	for k, e := range beam {
		var toks []Token
		for n := e.last; n != nil; n = n.parent {
			toks = append(toks, n.tok)
		}
		slices.Reverse(toks)
		var sum float64
		for _, t := range toks {
			sum += t.LogProb
		}
		out[k] = Hypothesis{Tokens: toks, LogProb: sum, Ended: e.ended}
	}
	return out, nil
}

// cand is a candidate extension in a beam step: entry's continuation
// extended by tok (-1: an ended continuation carried over).
type cand struct {
	score float64
	entry int
	tok   int
}

// cmp orders candidates: higher score first, then the earlier entry, then
// the lower token id, so that the beam is deterministic whatever the ties.
// It returns +1 when a ranks above b.
func (a cand) cmp(b cand) int {
	if a.score != b.score {
		if a.score > b.score {
			return 1
		}
		return -1
	}
	if a.entry != b.entry {
		if a.entry < b.entry {
			return 1
		}
		return -1
	}
	if a.tok != b.tok {
		if a.tok < b.tok {
			return 1
		}
		return -1
	}
	return 0
}

// candHeap keeps the best candidates offered, as a min-heap whose root is
// the worst kept one.
type candHeap struct{ items []cand }

func (h *candHeap) Len() int           { return len(h.items) }
func (h *candHeap) Less(i, j int) bool { return h.items[i].cmp(h.items[j]) < 0 }
func (h *candHeap) Swap(i, j int)      { h.items[i], h.items[j] = h.items[j], h.items[i] }
func (h *candHeap) Push(x any)         { h.items = append(h.items, x.(cand)) }
func (h *candHeap) Pop() any {
	x := h.items[len(h.items)-1]
	h.items = h.items[:len(h.items)-1]
	return x
}

// offer keeps c if it is among the best w seen so far.
func (h *candHeap) offer(w int, c cand) {
	if math.IsInf(c.score, -1) && c.tok >= 0 {
		return // probability zero: never a continuation
	}
	if len(h.items) < w {
		heap.Push(h, c)
		return
	}
	if c.cmp(h.items[0]) > 0 {
		h.items[0] = c
		heap.Fix(h, 0)
	}
}
