package eval

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"strconv"
)

// MaxOrder is the largest n-gram order the counts and models accept.
const MaxOrder = 16

// NoBoundary, passed as a boundary token id, means the tokenization has no
// token that ends a document: the whole sequence is one document.
const NoBoundary = -1

// ProgressFunc receives progress reports from long steps: the stage (such
// as "count 8-grams"), the units done and the units in total. Calls are
// never concurrent (they may come from different goroutines, one at a
// time), come at most a few hundred times a stage, and the last one has
// done == total. A nil ProgressFunc is never called.
type ProgressFunc func(stage string, done, total int)

func (f ProgressFunc) report(stage string, done, total int) {
	if f != nil {
		f(stage, done, total)
	}
}

// Counts holds the n-gram counts of a training sequence for every order
// from 1 to its Order, shared by the n-gram models fitted from it.
//
// Layout. A context (the k tokens before a predicted one, k < Order) is a
// node of a trie read backwards from the predicted token: the child of the
// empty context for symbol x is the context "x", whose child for y is "y x",
// and so on. Node ids index flat arrays; a node is found from its parent
// through one hash table keyed by parent·(V+1)+symbol (symbol V is the
// start-of-document padding). An event (a context followed by a token w)
// lives in a second hash table keyed by context·V+w, holding its raw count
// c(h w) and its continuation count N1+(• h w), the number of distinct
// tokens seen before h w. Reading the contexts backwards makes every
// shorter context of a history a prefix of the longer one's path, so
// scoring a token costs one walk of Order-1 steps plus one look-up an
// order.
//
// Padding. Every predicted token is counted at every order with its full
// context, the positions before the start of a document (the start of the
// sequence, and the token after each boundary token) being filled with the
// padding symbol. Hence every event below the top order has a continuation
// count of at least one.
type Counts struct {
	order, vocab, boundary int
	tokens                 int

	ctxIndex  *table
	ctxParent []int32
	ctxDepth  []uint8

	evIndex *table
	evCtx   []int32
	evWord  []int32
	evCount []uint32
	evCont  []uint32

	split int // the tokens of the split counted from; above tokens for a subset

	raw, cont ctxStats
	// coc[k][d][r] is the number of events at depth d whose raw (k = 0) or
	// continuation (k = 1) count is r, for r = 1..4 (index 0 unused).
	coc [2][MaxOrder][5]int
}

// ctxStats summarises the events of each context under one kind of count.
type ctxStats struct {
	total, distinct, n1, n2, n3 []uint32
}

func (s *ctxStats) resize(n int) {
	s.total = make([]uint32, n)
	s.distinct = make([]uint32, n)
	s.n1 = make([]uint32, n)
	s.n2 = make([]uint32, n)
	s.n3 = make([]uint32, n)
}

// CountNGrams counts the n-grams of orders 1..order of the training token
// ids train, each below vocab. boundary is the id of the token that ends a
// document (a line, a sentence, a file), or NoBoundary: the token itself is
// counted and predicted like any other, and the context after it starts
// afresh, as at the start of train. progress, if not nil, hears about the
// counting. It is CountNGramsOf without a memory budget.
func CountNGrams(train []int, vocab, order, boundary int, progress ProgressFunc) (*Counts, error) {
	return CountNGramsOf(IntTokens(train), vocab, order, boundary, CountOptions{Progress: progress})
}

// CountOptions sets up CountNGramsOf.
type CountOptions struct {
	// Memory caps the memory of the counts, as Counts.Bytes measures it,
	// in bytes; zero means no cap. When the counts of the whole training
	// split would take more, they are taken on a seeded subset of it
	// (CountNGramsOf says which).
	Memory int64
	// Seed chooses the subset's pieces.
	Seed uint64
	// Progress, if not nil, hears about the counting.
	Progress ProgressFunc

	piece int // the subset's piece length in tokens; 0 means SubsetPieceTokens (tests shorten it)
}

// SubsetPieceTokens is the length in tokens of the pieces a memory budget
// draws its subset of the training split from (CountNGramsOf).
const SubsetPieceTokens = 1 << 20

// Bytes the counts hold for each context and each event beyond the slots
// of their hash tables (Counts.Bytes): a context's parent (4) and depth (1)
// and its raw and continuation summaries (2·5·4); an event's context,
// token, raw count and continuation count (4 each).
const (
	contextBytes = 4 + 1 + 2*5*4
	eventBytes   = 16
)

// initialHint is the most tokens the hash tables of counts under a memory
// budget are first sized for.
const initialHint = 1 << 22

// errBudget stops a walk over the windows of a split when the memory
// budget is reached.
var errBudget = errors.New("memory budget reached")

// CountNGramsOf counts the n-grams of the training split train as
// CountNGrams does, reading it window by window, within the memory budget
// opts.Memory.
//
// The budget rule. The whole split is counted first, in order. If, before
// some token, counting it could take Counts.Bytes past the budget (its
// order events and order-1 contexts all new, with the hash tables grown
// if they would be), those counts are dropped and the counts are taken
// afresh on a subset instead: the split is cut into pieces of
// SubsetPieceTokens tokens (the last one shorter), the pieces are ordered
// by a hash of their index and opts.Seed (splitmix64 of seed + (index+1)·
// 0x9E3779B97F4A7C15, ties by index), and they are counted in that order,
// each from its start to its end, until the same test stops the counting
// before a token: the subset is the pieces counted whole plus the
// beginning of the piece counting stopped in. Each piece starts a
// document: the contexts of its first tokens are padded as at the start
// of the split, so no n-gram spans two pieces (a boundary token inside a
// piece starts a document as usual). The same split, seed and budget always
// give the same subset; Tokens says how many tokens it holds and
// SplitTokens how many the split does. A split of 2^32-1 tokens or more is
// counted on a subset of fewer (counts are 32-bit); without a budget it
// is an error.
func CountNGramsOf(train TokenReader, vocab, order, boundary int, opts CountOptions) (*Counts, error) {
	if vocab < 1 {
		return nil, fmt.Errorf("count n-grams: vocabulary size %d is below 1", vocab)
	}
	if order < 1 || order > MaxOrder {
		return nil, fmt.Errorf("count n-grams: order %d outside 1..%d", order, MaxOrder)
	}
	if boundary < NoBoundary || boundary >= vocab {
		return nil, fmt.Errorf("count n-grams: boundary token %d outside 0..%d", boundary, vocab-1)
	}
	if opts.Memory < 0 {
		return nil, fmt.Errorf("count n-grams: memory budget %d is negative", opts.Memory)
	}
	n := train.Len()
	if n == 0 {
		return nil, errors.New("count n-grams: no training tokens")
	}
	if opts.Memory == 0 && n >= math.MaxUint32 {
		return nil, fmt.Errorf("count n-grams: %d training tokens, more than %d", n, math.MaxUint32-1)
	}
	hint := n
	if opts.Memory > 0 {
		// The tables of newCounts(hint) take at most 24·hint bytes, and
		// a long split has far fewer distinct n-grams than tokens: start
		// them smaller and let them grow. Table sizes change no count
		// and no id (ids are given in order of first sight).
		hint = int(min(int64(n), opts.Memory/32, initialHint))
	}
	stage := fmt.Sprintf("count %d-grams", order)
	k := newCounter(newCounts(vocab, order, boundary, hint), opts.Memory)
	err := eachWindow(train, 0, n, func(off int, ids []int) error {
		opts.Progress.report(stage, off, n)
		return k.count(off, ids)
	})
	switch {
	case err == nil:
		k.c.split = n
		opts.Progress.report(stage, n, n)
		k.c.finish()
		return k.c, nil
	case err != errBudget:
		return nil, err
	}
	opts.Progress.report(stage, n, n)

	// Drop the counts of the split's beginning before counting the subset,
	// whose tables and arrays start at the sizes those reached within the
	// budget, so that they seldom grow (a growing table holds its old and
	// new slots at once).
	ctxSlots, evSlots := len(k.c.ctxIndex.keys), len(k.c.evIndex.keys)
	nctx, nev := len(k.c.ctxParent), len(k.c.evCount)
	k.c = nil
	runtime.GC()
	c := &Counts{order: order, vocab: vocab, boundary: boundary, ctxIndex: &table{}, evIndex: &table{}}
	c.ctxIndex.init(ctxSlots)
	c.evIndex.init(evSlots)
	c.ctxParent = append(make([]int32, 0, nctx), -1)
	c.ctxDepth = append(make([]uint8, 0, nctx), 0)
	c.evCtx, c.evWord, c.evCount = make([]int32, 0, nev), make([]int32, 0, nev), make([]uint32, 0, nev)
	k.c = c
	piece := opts.piece
	if piece <= 0 {
		piece = SubsetPieceTokens
	}
	pieces := subsetPieces(n, piece, opts.Seed)
	stage += " on a subset"
	for i, p := range pieces {
		opts.Progress.report(stage, i, len(pieces))
		k.reset()
		from := p * piece
		err = eachWindow(train, from, min(from+piece, n), k.count)
		if err != nil {
			break
		}
	}
	if err != nil && err != errBudget {
		return nil, err
	}
	opts.Progress.report(stage, len(pieces), len(pieces))
	if k.c.tokens == 0 {
		return nil, fmt.Errorf("count n-grams: a memory budget of %d bytes holds no %d-gram counts (an empty store takes %d)", opts.Memory, order, k.c.Bytes())
	}
	k.c.split = n
	k.c.finish()
	return k.c, nil
}

// subsetPieces returns the indices of the pieces of piece tokens of a
// split of n tokens in the order CountNGramsOf counts them.
func subsetPieces(n, piece int, seed uint64) []int {
	count := (n + piece - 1) / piece
	keys := make([]uint64, count)
	idx := make([]int, count)
	for i := range idx {
		idx[i] = i
		keys[i] = splitmix64(seed + uint64(i+1)*0x9E3779B97F4A7C15)
	}
	sort.Slice(idx, func(a, b int) bool {
		ka, kb := keys[idx[a]], keys[idx[b]]
		return ka < kb || ka == kb && idx[a] < idx[b]
	})
	return idx
}

// splitmix64 is the output function of the SplitMix64 generator (Steele,
// Lea & Flood 2014): a bijective mix of the bits of z.
func splitmix64(z uint64) uint64 {
	z = (z ^ z>>30) * 0xBF58476D1CE4E5B9
	z = (z ^ z>>27) * 0x94D049BB133111EB
	return z ^ z>>31
}

// counter adds tokens to counts, keeping the history of the document it
// is in.
type counter struct {
	c      *Counts
	hist   []int // hist[0] is the latest token; vocab pads
	memory int64 // the budget of c.Bytes(); 0 for none
}

func newCounter(c *Counts, memory int64) *counter {
	k := &counter{c: c, hist: make([]int, c.order-1), memory: memory}
	k.reset()
	return k
}

// reset starts a document: every context is the padding.
func (k *counter) reset() {
	for i := range k.hist {
		k.hist[i] = k.c.vocab
	}
}

// count counts the tokens ids, the first at position off of the split. It
// returns errBudget, counting nothing more, before a token that could take
// the counts past the memory budget or their 32-bit limit.
func (k *counter) count(off int, ids []int) error {
	c, hist := k.c, k.hist
	vocab := c.vocab
	V := uint64(vocab)
	V1 := uint64(vocab + 1)
	// The test before each token can only fail when the whole window,
	// every token of it new at every order, might not fit.
	check := k.memory > 0 && (c.tokens+len(ids) >= math.MaxUint32-1 || !c.fits(k.memory, len(ids)))
	for j, w := range ids {
		if w < 0 || w >= vocab {
			return fmt.Errorf("count n-grams: token %d at position %d outside 0..%d", w, off+j, vocab-1)
		}
		if check && (c.tokens >= math.MaxUint32-1 || !c.fits(k.memory, 1)) {
			return errBudget
		}
		slots := len(c.evIndex.keys) + len(c.ctxIndex.keys)
		c.addEvent(uint64(w), 0, w)
		ctx := int32(0)
		for d, x := range hist {
			id, added := c.ctxIndex.getOrPut(uint64(ctx)*V1+uint64(x), int32(len(c.ctxParent)))
			if added {
				c.ctxParent = append(c.ctxParent, ctx)
				c.ctxDepth = append(c.ctxDepth, uint8(d+1))
			}
			ctx = id
			c.addEvent(uint64(ctx)*V+uint64(w), ctx, w)
		}
		if len(hist) > 0 {
			if w == c.boundary {
				k.reset()
			} else {
				copy(hist[1:], hist[:len(hist)-1])
				hist[0] = w
			}
		}
		c.tokens++
		if k.memory > 0 && len(c.evIndex.keys)+len(c.ctxIndex.keys) != slots {
			// Under a budget, free the table's old slots at once rather
			// than at the collector's pace, which lets the heap reach
			// twice what is live.
			runtime.GC()
		}
	}
	return nil
}

// fits reports whether Bytes stays within memory whatever the next m
// tokens add: order new events and order-1 new contexts each, with the
// hash tables grown as they would be.
func (c *Counts) fits(memory int64, m int) bool {
	e := len(c.evCount) + c.order*m
	x := len(c.ctxParent) + (c.order-1)*m
	return c.evIndex.bytesWith(e)+c.ctxIndex.bytesWith(x)+int64(x)*contextBytes+int64(e)*eventBytes <= memory
}

func newCounts(vocab, order, boundary, hint int) *Counts {
	c := &Counts{order: order, vocab: vocab, boundary: boundary}
	c.ctxIndex = newTable(hint / 4)
	c.evIndex = newTable(hint / 2)
	c.ctxParent = append(c.ctxParent, -1)
	c.ctxDepth = append(c.ctxDepth, 0)
	return c
}

func (c *Counts) addEvent(key uint64, ctx int32, w int) {
	id, added := c.evIndex.getOrPut(key, int32(len(c.evCount)))
	if added {
		c.evCtx = append(c.evCtx, ctx)
		c.evWord = append(c.evWord, int32(w))
		c.evCount = append(c.evCount, 1)
		return
	}
	c.evCount[id]++
}

// addGram counts one occurrence of the n-gram gram (context tokens then the
// predicted one, all regular ids), creating its context nodes. It lets a
// test count n-grams under another convention than CountNGrams's.
func (c *Counts) addGram(gram []int) {
	w := gram[len(gram)-1]
	ctx := int32(0)
	V1 := uint64(c.vocab + 1)
	for j := len(gram) - 2; j >= 0; j-- {
		id, added := c.ctxIndex.getOrPut(uint64(ctx)*V1+uint64(gram[j]), int32(len(c.ctxParent)))
		if added {
			c.ctxParent = append(c.ctxParent, ctx)
			c.ctxDepth = append(c.ctxDepth, uint8(len(gram)-1-j))
		}
		ctx = id
	}
	c.addEvent(uint64(ctx)*uint64(c.vocab)+uint64(w), ctx, w)
	if len(gram) == 1 {
		c.tokens++
		c.split++
	}
}

// finish derives the continuation counts, the per-context summaries and
// the count-of-counts from the raw counts.
func (c *Counts) finish() {
	V := uint64(c.vocab)
	c.evCont = make([]uint32, len(c.evCount))
	for e, ctx := range c.evCtx {
		if ctx == 0 {
			continue
		}
		p := c.ctxParent[ctx]
		if pe := c.evIndex.get(uint64(p)*V + uint64(c.evWord[e])); pe >= 0 {
			c.evCont[pe]++
		}
	}
	n := len(c.ctxParent)
	c.raw.resize(n)
	c.cont.resize(n)
	for e, ctx := range c.evCtx {
		d := c.ctxDepth[ctx]
		for k, cnt := range [2]uint32{c.evCount[e], c.evCont[e]} {
			if cnt == 0 {
				continue
			}
			s := &c.raw
			if k == 1 {
				s = &c.cont
			}
			s.total[ctx] += cnt
			s.distinct[ctx]++
			switch cnt {
			case 1:
				s.n1[ctx]++
			case 2:
				s.n2[ctx]++
			default:
				s.n3[ctx]++
			}
			if cnt <= 4 {
				c.coc[k][d][cnt]++
			}
		}
	}
}

// Order is the largest order counted.
func (c *Counts) Order() int { return c.order }

// VocabSize is the number of token ids, 0..V-1.
func (c *Counts) VocabSize() int { return c.vocab }

// Boundary is the boundary token id, or NoBoundary.
func (c *Counts) Boundary() int { return c.boundary }

// Tokens is the number of training tokens counted.
func (c *Counts) Tokens() int { return c.tokens }

// SplitTokens is the number of tokens of the training split the counts were
// taken from: Tokens when they were taken on all of it, more when a memory
// budget limited them to a subset (CountNGramsOf).
func (c *Counts) SplitTokens() int { return c.split }

// TrainingNote says, when the counts were taken on a subset of the
// training split, how much of it: "counts from 200 M of 900 M training
// tokens"; it is "" for counts of the whole split.
func (c *Counts) TrainingNote() string {
	if c.split <= c.tokens {
		return ""
	}
	return fmt.Sprintf("counts from %s of %s training tokens", tokenAmount(c.tokens), tokenAmount(c.split))
}

// tokenAmount writes a number of tokens for a note: in full with
// thousands separators below a million, else in millions with three
// significant figures or more ("4.19 M", "200 M", "1250 M").
func tokenAmount(n int) string {
	if n < 1_000_000 {
		return Thousands(int64(n))
	}
	m := float64(n) / 1e6
	prec := 0
	switch {
	case m < 10:
		prec = 2
	case m < 100:
		prec = 1
	}
	return strconv.FormatFloat(m, 'f', prec, 64) + " M"
}

// Events is the number of distinct n-grams of all orders.
func (c *Counts) Events() int { return len(c.evCount) }

// Contexts is the number of distinct contexts of all lengths, the empty one
// included.
func (c *Counts) Contexts() int { return len(c.ctxParent) }

// Bytes estimates the memory the counts hold: 12 bytes a slot of their two
// hash tables (each kept at most 3/4 full, so 16 to 32 bytes an entry),
// 45 bytes a context and 16 bytes an event besides. The slack of the
// arrays' capacity is not counted.
func (c *Counts) Bytes() int64 {
	return c.ctxIndex.bytes() + c.evIndex.bytes() +
		int64(len(c.ctxParent))*contextBytes + int64(len(c.evCount))*eventBytes
}

// CountOfCounts returns n1..n4, the numbers of distinct n-grams of the given
// order (1..Order) seen exactly 1, 2, 3 and 4 times, by raw counts or, with
// continuation set, by continuation counts N1+(• h w) (zero at the top
// order, which has no longer n-grams).
func (c *Counts) CountOfCounts(order int, continuation bool) [4]int {
	k := 0
	if continuation {
		k = 1
	}
	v := c.coc[k][order-1]
	return [4]int{v[1], v[2], v[3], v[4]}
}

// child returns the context extending ctx one token further back with sym,
// or -1.
func (c *Counts) child(ctx int32, sym int) int32 {
	return c.ctxIndex.get(uint64(ctx)*uint64(c.vocab+1) + uint64(sym))
}

// event returns the event id of w after ctx, or -1.
func (c *Counts) event(ctx int32, w int) int32 {
	return c.evIndex.get(uint64(ctx)*uint64(c.vocab) + uint64(w))
}
