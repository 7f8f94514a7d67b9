package eval

import (
	"errors"
	"fmt"
	"math"
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
// counting.
func CountNGrams(train []int, vocab, order, boundary int, progress ProgressFunc) (*Counts, error) {
	if vocab < 1 {
		return nil, fmt.Errorf("count n-grams: vocabulary size %d is below 1", vocab)
	}
	if order < 1 || order > MaxOrder {
		return nil, fmt.Errorf("count n-grams: order %d outside 1..%d", order, MaxOrder)
	}
	if boundary < NoBoundary || boundary >= vocab {
		return nil, fmt.Errorf("count n-grams: boundary token %d outside 0..%d", boundary, vocab-1)
	}
	if len(train) == 0 {
		return nil, errors.New("count n-grams: no training tokens")
	}
	if len(train) >= math.MaxUint32 {
		return nil, fmt.Errorf("count n-grams: %d training tokens, more than %d", len(train), math.MaxUint32-1)
	}
	c := newCounts(vocab, order, boundary, len(train))
	stage := fmt.Sprintf("count %d-grams", order)
	V := uint64(vocab)
	V1 := uint64(vocab + 1)
	hist := make([]int, order-1) // hist[0] is the latest token
	for i := range hist {
		hist[i] = vocab
	}
	const every = 1 << 16
	for i, w := range train {
		if w < 0 || w >= vocab {
			return nil, fmt.Errorf("count n-grams: token %d at position %d outside 0..%d", w, i, vocab-1)
		}
		if i%every == 0 {
			progress.report(stage, i, len(train))
		}
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
			if w == boundary {
				for j := range hist {
					hist[j] = vocab
				}
			} else {
				copy(hist[1:], hist[:len(hist)-1])
				hist[0] = w
			}
		}
	}
	c.tokens = len(train)
	progress.report(stage, len(train), len(train))
	c.finish()
	return c, nil
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

// Events is the number of distinct n-grams of all orders.
func (c *Counts) Events() int { return len(c.evCount) }

// Contexts is the number of distinct contexts of all lengths, the empty one
// included.
func (c *Counts) Contexts() int { return len(c.ctxParent) }

// Bytes estimates the memory the counts hold.
func (c *Counts) Bytes() int64 {
	return c.ctxIndex.bytes() + c.evIndex.bytes() +
		int64(len(c.ctxParent))*(4+1+2*5*4) + int64(len(c.evCount))*16
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
