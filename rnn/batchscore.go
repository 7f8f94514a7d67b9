package rnn

import (
	"context"
	"fmt"
	"math"
	"slices"

	"weft/rnn/linalg"
)

// Batched scoring: many sequences at once as the parallel streams of one
// forward pass.
//
// LogProbs scores one sequence as a batch of one, so every step's
// recurrent product is a matrix-vector product (1×H by H×G), bound by
// reading the weights from memory. A BatchScorer runs up to its number of
// streams of sequences side by side, each from its own state and for its
// own length, so that each step reads the weights once for all of them
// (B×H by H×G): the products of training again, forward only.
//
// The sequences wait in a queue, longest first; each row of the batch
// takes the next one as soon as its own ends, so the batch stays full
// until the queue is empty, and then the rows still running close up to
// the front. A pass ends where the shortest running row ends, but runs at
// least minPass steps (or to the end of the longest row): a row that ends
// inside a pass reads padding to its end, which is neither scored nor
// carried; no row reads another's. Every number is the one LogProbs gives
// for the same sequence, bit for bit: each row of a product and each
// row's gate and softmax arithmetic is computed by the same code whatever
// the number of rows and whichever row it is (linalg.Gemm reduces every
// element over k in the same blocks and order; the cells and the output
// layer work row by row).

// BatchStreams is the number of streams Model.LogProbsBatch scores side by
// side: enough rows for the matrix kernels' register tiles (8 rows on
// AVX-512) to be full several times over, few enough that the state of a
// pass stays in the caches.
const BatchStreams = 64

// minPass is the fewest steps a batched pass runs while any of its
// streams has that many left. A row that ends inside a pass reads padding
// to the pass's end: for the demo log's lines (144 characters on average,
// in calls of 256) 4.7% of the steps computed at 16, 1.0% at 4 (counted by
// replaying the passes on the line lengths). Each pass also pays its start
// (states carried, rows refilled); the recurrent weights are packed once
// per call (holdPacks).
const minPass = 4

// Carry is the carried state of one scored stream: the recurrent state
// after every token it has been given but the last, and that last token,
// which is read when the next tokens are scored. Scoring a text in
// consecutive parts through one Carry gives the numbers LogProbs gives for
// the whole text, bit for bit. A new Carry is at the start of a document.
// A Carry belongs to the model that made it.
type Carry[T Float] struct {
	h, c []T // layers·H each; c nil without a cell state
	last int // the token given last, still to be read; -1 at the start of a document
}

// NewCarry returns a carried state at the start of a document.
func (m *Model[T]) NewCarry() *Carry[T] {
	n := len(m.layers) * m.cfg.HiddenSize
	c := &Carry[T]{h: make([]T, n), last: -1}
	if m.cell.hasCellState() {
		c.c = make([]T, n)
	}
	return c
}

// Reset puts c back at the start of a document.
func (c *Carry[T]) Reset() {
	clear(c.h)
	clear(c.c)
	c.last = -1
}

// Started reports whether c has been given any token since the start of
// the document.
func (c *Carry[T]) Started() bool { return c.last >= 0 }

// Clone returns an independent copy of c.
func (c *Carry[T]) Clone() *Carry[T] {
	return &Carry[T]{h: slices.Clone(c.h), c: slices.Clone(c.c), last: c.last}
}

// A BatchScorer scores many sequences side by side with one model (see
// Model.NewBatchScorer). It reuses its buffers between calls. It is not
// safe for concurrent use; several BatchScorers of one model are.
type BatchScorer[T Float] struct {
	m       *Model[T]
	w       *work[T]
	streams int

	order   []int  // the sequences with steps to run, longest first
	steps   []int  // steps[i]: forward steps of sequence i
	started []bool // started[i]: sequence i continues a carried state
	rows    []int  // rows[b]: the sequence in row b of the batch
	done    []int  // done[b]: the steps row b's sequence has run
	in      []int
	tg      []int
	lp      []float64
	table   []T // the first layer's input pre-activations of every token (see useTable)
}

// NewBatchScorer returns a scorer of up to streams sequences per pass,
// running on the pool set by SetPool.
func (m *Model[T]) NewBatchScorer(streams int) *BatchScorer[T] {
	if streams < 1 {
		panic("rnn: NewBatchScorer needs at least one stream")
	}
	s := &BatchScorer[T]{m: m, streams: streams, w: newWork(m, streams, scoreChunk, false)}
	s.in = make([]int, scoreChunk*streams)
	if s.w.cls != nil {
		s.tg, s.lp = make([]int, scoreChunk*streams), make([]float64, scoreChunk*streams)
	}
	return s
}

// LogProbsBatch writes to dst[i][j] ln P(seqs[i][j] | seqs[i][:j]) for
// every sequence i, each from the start of a document: exactly what
// LogProbs writes for each sequence alone (with the default exact
// scoring), computed up to BatchStreams sequences at a time as the
// parallel streams of one forward pass. len(dst[i]) must equal
// len(seqs[i]). Concurrent calls are safe; the model keeps the scorers
// of finished calls for later ones, so that a caller scoring batch after
// batch does not allocate a pass's buffers each time.
func (m *Model[T]) LogProbsBatch(ctx context.Context, dst [][]float64, seqs [][]int) error {
	if len(seqs) == 0 {
		return nil
	}
	s, _ := m.scorers.Get().(*BatchScorer[T])
	if s == nil {
		s = m.NewBatchScorer(BatchStreams)
	}
	defer m.scorers.Put(s)
	return s.LogProbs(ctx, dst, seqs, nil)
}

// LogProbs writes to dst[i][j] the natural logarithm of
// P(seqs[i][j] | h_i, seqs[i][:j]), where h_i is the history carry[i] has
// been given (the start of a document when carry is nil or carry[i] is
// nil), and moves carry[i] on past seqs[i] (a carry may appear once per
// call). The sequences are scored s.streams at a time. A sequence's
// numbers are those LogProbs gives for its history and itself as one
// sequence. len(dst[i]) must equal len(seqs[i]). It checks ctx between
// passes; on an error the carries may be partly advanced.
func (s *BatchScorer[T]) LogProbs(ctx context.Context, dst [][]float64, seqs [][]int, carry []*Carry[T]) error {
	m := s.m
	if len(dst) != len(seqs) || (carry != nil && len(carry) != len(seqs)) {
		return fmt.Errorf("LogProbs: %d destinations and %d carries for %d sequences", len(dst), len(carry), len(seqs))
	}
	for i, seq := range seqs {
		if len(dst[i]) != len(seq) {
			return fmt.Errorf("LogProbs: %d destinations for %d tokens of sequence %d", len(dst[i]), len(seq), i)
		}
		for j, tok := range seq {
			if tok < 0 || tok >= m.vocab {
				return fmt.Errorf("LogProbs: token %d at position %d of sequence %d outside the vocabulary 0..%d", tok, j, i, m.vocab-1)
			}
		}
		if carry != nil && carry[i] != nil && len(carry[i].h) != len(m.layers)*m.cfg.HiddenSize {
			return fmt.Errorf("LogProbs: carried state %d is not of this model", i)
		}
	}
	return s.score(ctx, dst, seqs, carry)
}

// score runs the sequences through the batch's rows: each row takes the
// next waiting sequence (longest first) as soon as its own ends, so that
// the batch stays full until the queue is empty; then the rows still
// running close up to the front.
func (s *BatchScorer[T]) score(ctx context.Context, dst [][]float64, seqs [][]int, carry []*Carry[T]) error {
	m, w := s.m, s.w
	V := m.vocab
	cr := func(i int) *Carry[T] {
		if carry == nil {
			return nil
		}
		return carry[i]
	}
	// A started stream reads its carried last token first, and predicts
	// every token of its sequence; a fresh one predicts its first token
	// from the zero state without a step. started is fixed before any
	// carry moves.
	if cap(s.steps) < len(seqs) {
		s.steps = make([]int, len(seqs))
		s.started = make([]bool, len(seqs))
	}
	steps, started := s.steps[:len(seqs)], s.started[:len(seqs)]
	s.order = s.order[:0]
	for i, seq := range seqs {
		c := cr(i)
		started[i] = c != nil && c.Started()
		n := len(seq)
		switch {
		case n == 0:
			steps[i] = 0
		case started[i]:
			steps[i] = n
		default:
			dst[i][0] = m.startLogProb(seq[0])
			steps[i] = n - 1
			if n == 1 && c != nil {
				// No step: the carry starts with the zero state.
				c.Reset()
				c.last = seq[0]
			}
		}
		if steps[i] > 0 {
			s.order = append(s.order, i)
		}
	}
	slices.SortStableFunc(s.order, func(a, b int) int { return steps[b] - steps[a] })
	total := 0
	for _, i := range s.order {
		total += steps[i]
	}
	w.inTable = nil
	if s.useTable(total) {
		w.inTable = s.inputTable()
	}
	// read is the token stream i reads at step t; target the position of
	// seqs[i] predicted at step t.
	read := func(i, t int) int {
		if started[i] {
			if t == 0 {
				return cr(i).last
			}
			return seqs[i][t-1]
		}
		return seqs[i][t]
	}
	target := func(i, t int) int {
		if started[i] {
			return t
		}
		return t + 1
	}
	queue := s.order
	s.rows, s.done = s.rows[:0], s.done[:0]
	defer func() {
		w.B, w.inTable = s.streams, nil
		s.holdPacks(false)
	}()
	// take puts the next waiting sequence in row b (appending a row when b
	// is len(s.rows)), loading its state into row block 0.
	take := func(b int) {
		i := queue[0]
		queue = queue[1:]
		if b == len(s.rows) {
			s.rows, s.done = append(s.rows, i), append(s.done, 0)
		} else {
			s.rows[b], s.done[b] = i, 0
		}
		s.load(cr(i), started[i], b)
	}
	for len(queue) > 0 && len(s.rows) < s.streams {
		take(len(s.rows))
	}
	for len(s.rows) > 0 {
		B := len(s.rows)
		w.B = B
		// The pass runs to where its shortest row ends, but at least
		// minPass steps (or to the end of its longest): a row that ends
		// inside the pass reads padding after its end, neither scored
		// nor carried, rather than every end cutting a pass short.
		lo, hi := math.MaxInt, 0
		for b, i := range s.rows {
			r := steps[i] - s.done[b]
			lo, hi = min(lo, r), max(hi, r)
		}
		c := min(w.max, max(lo, min(minPass, hi)))
		for t := 0; t < c; t++ {
			for b, i := range s.rows {
				tok := 0
				if s.done[b]+t < steps[i] {
					tok = read(i, s.done[b]+t)
				}
				s.in[t*B+b] = tok
			}
		}
		w.forward(m.pool, s.in, c, false)
		s.holdPacks(true)
		if w.cls != nil {
			for t := 0; t < c; t++ {
				for b, i := range s.rows {
					s.tg[t*B+b] = -1
					if s.done[b]+t < steps[i] {
						s.tg[t*B+b] = seqs[i][target(i, s.done[b]+t)]
					}
				}
			}
			w.classLogProbs(m.pool, s.lp, s.tg, c*B)
		}
		for t := 0; t < c; t++ {
			for b, i := range s.rows {
				if s.done[b]+t >= steps[i] {
					continue
				}
				r := t*B + b
				pos := target(i, s.done[b]+t)
				if w.cls != nil {
					dst[i][pos] = s.lp[r]
				} else {
					row := w.logits[r*V : (r+1)*V]
					dst[i][pos] = logSoftmaxAt(row, seqs[i][pos])
				}
			}
		}
		// Rows that end in this pass save the state after their last step
		// (row block steps−done of the pass) before the pass's last state
		// becomes block 0.
		for b, i := range s.rows {
			if k := steps[i] - s.done[b]; k <= c {
				s.save(cr(i), k, b, seqs[i])
			}
		}
		w.carry(c)
		// Ended rows take waiting sequences; with none left, the rows
		// still running close up.
		for b := 0; b < len(s.rows); {
			i := s.rows[b]
			s.done[b] += c
			if s.done[b] < steps[i] {
				b++
				continue
			}
			if len(queue) > 0 {
				take(b)
				b++
				continue
			}
			last := len(s.rows) - 1
			if b != last {
				// The last row has not been advanced yet: it is, when
				// the loop visits row b again.
				s.move(last, b)
				s.rows[b], s.done[b] = s.rows[last], s.done[last]
			}
			s.rows, s.done = s.rows[:last], s.done[:last]
		}
		if err := ctx.Err(); err != nil {
			return err
		}
	}
	return nil
}

// load sets row b of row block 0 (with the batch at its current size) to
// c's state, or to the zero state for a fresh stream.
func (s *BatchScorer[T]) load(c *Carry[T], started bool, b int) {
	H := s.m.cfg.HiddenSize
	for l := range s.w.layers {
		lw := &s.w.layers[l]
		hb := lw.h[b*H : (b+1)*H]
		if started {
			copy(hb, c.h[l*H:(l+1)*H])
		} else {
			clear(hb)
		}
		if lw.c != nil {
			cb := lw.c[b*H : (b+1)*H]
			if started {
				copy(cb, c.c[l*H:(l+1)*H])
			} else {
				clear(cb)
			}
		}
	}
}

// move copies row from of row block 0 to row to (block 0 starts at
// offset 0 whatever the batch size).
func (s *BatchScorer[T]) move(from, to int) {
	H := s.m.cfg.HiddenSize
	for l := range s.w.layers {
		lw := &s.w.layers[l]
		copy(lw.h[to*H:(to+1)*H], lw.h[from*H:(from+1)*H])
		if lw.c != nil {
			copy(lw.c[to*H:(to+1)*H], lw.c[from*H:(from+1)*H])
		}
	}
}

// save copies row b of row block k of the last pass's states into c,
// whose last token becomes the last of seq.
func (s *BatchScorer[T]) save(c *Carry[T], k, b int, seq []int) {
	if c == nil {
		return
	}
	H := s.m.cfg.HiddenSize
	o := (k*s.w.B + b) * H
	for l := range s.w.layers {
		lw := &s.w.layers[l]
		copy(c.h[l*H:(l+1)*H], lw.h[o:o+H])
		if lw.c != nil {
			copy(c.c[l*H:(l+1)*H], lw.c[o:o+H])
		}
	}
	c.last = seq[len(seq)-1]
}

// useTable says whether the passes of a call with steps forward steps in
// all read the first layer's input pre-activations from a table of every
// token (inputTable) rather than computing them position by position: when
// the steps are at least twice the vocabulary, so that the table's V rows
// cost at most half the rows they replace, and the table is no larger than
// the pre-activation buffer of one pass. The table is made afresh for each
// call, so it always holds the model's current weights.
func (s *BatchScorer[T]) useTable(steps int) bool {
	V := s.m.vocab
	return steps >= 2*V && V <= s.streams*scoreChunk
}

// inputTable computes into s.table the first layer's input pre-activations
// of every token id v, row v of
//
//	W_ih e_v + b   (embedding input: e_v row v of the embedding)
//	W_ih[:, v] + b (one-hot input),
//
// with the operations forward runs for a position that reads v: the same
// linalg.Gemm (which gives a row the same bits whichever row of a product
// it is and however many rows there are) and the same bias addition, so a
// pass that copies row v gives every number a pass computing it gives.
func (s *BatchScorer[T]) inputTable() []T {
	m := s.m
	lp := &m.layers[0]
	V, G := m.vocab, lp.g
	if cap(s.table) < V*G {
		s.table = make([]T, V*G)
	}
	tb := s.table[:V*G]
	if E := m.cfg.EmbeddingSize; E > 0 {
		linalg.Gemm(m.pool, false, true, V, G, lp.in, 1, m.emb, lp.in, lp.wIn, lp.in, 0, tb, G)
		addRowsPool(m.pool, &s.w.layers[0].cw.mat, tb, lp.bias, V, G, G)
		return tb
	}
	for v := 0; v < V; v++ {
		row := tb[v*G : (v+1)*G]
		for j := range row {
			row[j] = lp.wIn[j*V+v] + lp.bias[j]
		}
	}
	return tb
}

// holdPacks keeps (on) the recurrent weights the passes of this call have
// packed for the passes after, or lets the next pass pack them again (off,
// at the end of a call: the weights may change before the next). A packed
// product gives the bits of the unpacked one (mulRec), so which passes
// pack changes no number.
func (s *BatchScorer[T]) holdPacks(on bool) {
	for l := range s.w.layers {
		for k := range s.w.layers[l].cw.pack {
			s.w.layers[l].cw.pack[k].held = on
		}
	}
}
