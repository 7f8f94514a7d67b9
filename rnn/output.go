package rnn

import (
	"fmt"
	"math"
	"math/bits"

	"weft/rnn/linalg"
)

// This file is the class-based output layer (output_layer = "class"): the
// two-level softmax of Goodman (2001), "Classes for fast maximum entropy
// training", with the classes made by frequency binning as in Mikolov et
// al. (2011), "Extensions of recurrent neural network language model". See
// "Output layer" in the package documentation for the equations.

// classCount is the number of classes cfg asks for with a vocabulary of V
// entries: output_classes, or the nearest integer to √V when it is zero.
func (c Config) classCount(V int) int {
	if c.OutputClasses > 0 {
		return c.OutputClasses
	}
	return max(1, int(math.Round(math.Sqrt(float64(V)))))
}

// FrequencyClasses partitions the token ids 0..len(counts)−1 into classes
// contiguous ranges of ids by frequency binning and returns the classes+1
// boundaries: class k holds the ids start[k] ≤ id < start[k+1]. Walking the
// ids in order with the running total S(i) = Σ_{j<i} counts[j] of the
// counts before id i (of N in all), class k starts at the first id whose
// S(i) reaches k·N/classes, so that each class holds about 1/classes of the
// training tokens; every class gets at least one id. A data.Vocab lists
// its entries by decreasing count after the reserved ones, so this is
// Mikolov et al.'s (2011) binning of the frequency-sorted vocabulary: few
// frequent words in the first classes, many rare ones in the last. When
// every count is zero each id weighs 1 (classes of equal size). It panics
// unless 1 ≤ classes ≤ len(counts) and every count is ≥ 0.
func FrequencyClasses(counts []int64, classes int) []int {
	V := len(counts)
	if classes < 1 || classes > V {
		panic(fmt.Sprintf("rnn: FrequencyClasses: %d classes for %d ids", classes, V))
	}
	var total uint64
	for _, n := range counts {
		if n < 0 {
			panic("rnn: FrequencyClasses: negative count")
		}
		total += uint64(n)
	}
	weight := func(i int) uint64 { return uint64(counts[i]) }
	if total == 0 {
		total = uint64(V)
		weight = func(int) uint64 { return 1 }
	}
	start := make([]int, classes+1)
	start[classes] = V
	i, cum := 0, uint64(0) // cum = S(i)
	for k := 1; k < classes; k++ {
		for i <= start[k-1] {
			cum += weight(i)
			i++
		}
		for i < V-(classes-k) && below(cum, uint64(classes), uint64(k), total) {
			cum += weight(i)
			i++
		}
		start[k] = i
	}
	return start
}

// below reports a·b < c·d, exactly (128-bit products).
func below(a, b, c, d uint64) bool {
	h1, l1 := bits.Mul64(a, b)
	h2, l2 := bits.Mul64(c, d)
	return h1 < h2 || h1 == h2 && l1 < l2
}

// setClasses sets the class partition of a class-based model from the
// training counts (nil: every id weighs 1).
func (m *Model[T]) setClasses(counts []int64) error {
	V := m.vocab
	C := m.cfg.classCount(V)
	if C > V {
		return fmt.Errorf("model.output_classes (%d) is more than the vocabulary's %d entries", C, V)
	}
	if counts == nil {
		counts = make([]int64, V)
	}
	for id, n := range counts {
		if n < 0 {
			return fmt.Errorf("token count of id %d is negative (%d)", id, n)
		}
	}
	m.classStart = FrequencyClasses(counts, C)
	m.classOf = make([]int32, V)
	for k := 0; k < C; k++ {
		for id := m.classStart[k]; id < m.classStart[k+1]; id++ {
			m.classOf[id] = int32(k)
		}
	}
	return nil
}

// OutputClasses returns the class boundaries of a class-based output layer
// (see FrequencyClasses), a copy, or nil for the full softmax.
func (m *Model[T]) OutputClasses() []int {
	if m.classStart == nil {
		return nil
	}
	return append([]int(nil), m.classStart...)
}

// classWork holds the class layer's buffers for up to R positions.
type classWork[T Float] struct {
	scores []T          // R×C: class scores; after the loss, their gradient
	ct     []int        // R: class of each position's target, −1 when not scored
	order  []int        // R: the scored positions grouped by class, by position within a class
	off    []int        // C+1: group k is order[off[k]:off[k+1]]
	local  []int        // R: each grouped position's target index within its class
	hs     []T          // R×K: the output layer's input rows, grouped
	ws     []T          // word scores of each group over its class, group after group; after the loss, their gradient
	wOff   []int        // C+1: group k's scores start at ws[wOff[k]]
	dhs    []T          // R×K: ∂L/∂hs (training only)
	pool   *linalg.Pool // of the last forward pass, for the loss's products
}

func newClassWork[T Float](m *Model[T], R int, train bool) *classWork[T] {
	C, K := len(m.classStart)-1, m.outIn
	widest := 0
	for k := 0; k < C; k++ {
		widest = max(widest, m.classStart[k+1]-m.classStart[k])
	}
	cw := &classWork[T]{
		scores: make([]T, R*C),
		ct:     make([]int, R),
		order:  make([]int, R),
		off:    make([]int, C+1),
		local:  make([]int, R),
		hs:     make([]T, R*K),
		ws:     make([]T, R*widest),
		wOff:   make([]int, C+1),
	}
	if train {
		cw.dhs = make([]T, R*K)
	}
	return cw
}

func (cw *classWork[T]) floats() int {
	return len(cw.scores) + len(cw.hs) + len(cw.ws) + len(cw.dhs)
}

// classForward computes the class scores of the R rows of w.head,
//
//	s_r = W_c p_r + b_c,
//
// and, for a Stream (w.full), the whole distribution in w.logits.
func (w *work[T]) classForward(p *linalg.Pool, R int) {
	m, cw := w.m, w.cls
	C, K := len(m.classStart)-1, m.outIn
	sc := cw.scores[:R*C]
	cw.pool = p
	linalg.Gemm(p, false, true, R, C, K, 1, w.head, K, m.classW, K, 0, sc, C)
	for r := 0; r < R; r++ {
		row := sc[r*C : (r+1)*C]
		for j, b := range m.classB {
			row[j] += b
		}
	}
	if !w.full {
		return
	}
	V := m.vocab
	lg := w.logits[:R*V]
	linalg.Gemm(p, false, true, R, V, K, 1, w.head, K, m.outW, K, 0, lg, V)
	for r := 0; r < R; r++ {
		row := lg[r*V : (r+1)*V]
		for j, b := range m.outB {
			row[j] += b
		}
		m.classNormalise(row, sc[r*C:(r+1)*C])
	}
}

// classNormalise turns row, the word scores u of one position over the
// whole vocabulary, into log-probabilities given the class scores s:
//
//	ln P(w) = s_c(w) − ln Σ_k exp s_k + u_w − ln Σ_{v ∈ c(w)} exp u_v.
func (m *Model[T]) classNormalise(row, s []T) {
	lc := logSumExp(s)
	for k := 0; k+1 < len(m.classStart); k++ {
		seg := row[m.classStart[k]:m.classStart[k+1]]
		off := float64(s[k]) - lc - logSumExp(seg)
		for j, v := range seg {
			seg[j] = T(float64(v) + off)
		}
	}
}

// startRow writes to dst (V values) the scores of the start of a document
// (zero state): output.bias for the full softmax, whose softmax is the
// distribution, or the log-probabilities themselves for the class layer.
func (m *Model[T]) startRow(dst []T) {
	copy(dst, m.outB)
	if m.classStart != nil {
		m.classNormalise(dst, m.classB)
	}
}

// startLogProb is ln P(tok) at the start of a document (zero state).
func (m *Model[T]) startLogProb(tok int) float64 {
	if m.classStart == nil {
		return logSoftmaxAt(m.outB, tok)
	}
	k := int(m.classOf[tok])
	s, e := m.classStart[k], m.classStart[k+1]
	return logSoftmaxAt(m.classB, k) + logSoftmaxAt(m.outB[s:e], tok-s)
}

// classGroup groups the positions r < R with targets[r] ≥ 0 by their
// target's class (a counting sort, stable), gathers their rows of w.head
// and computes each group's word scores over its class,
//
//	u_r = W_y[c] p_r + b_y[c],
//
// with W_y[c], b_y[c] the rows of output.weight and output.bias of the ids
// of class c: one matrix product per class, |group|×|class|×K.
func (w *work[T]) classGroup(p *linalg.Pool, targets []int, R int) {
	m, cw := w.m, w.cls
	C, K := len(m.classStart)-1, m.outIn
	clear(cw.off)
	for r, t := range targets[:R] {
		cw.ct[r] = -1
		if t >= 0 {
			k := int(m.classOf[t])
			cw.ct[r] = k
			cw.off[k+1]++
		}
	}
	for k := 0; k < C; k++ {
		cw.off[k+1] += cw.off[k]
	}
	next := cw.wOff[:C] // borrowed as fill cursors, rewritten below
	copy(next, cw.off[:C])
	for r, k := range cw.ct[:R] {
		if k >= 0 {
			i := next[k]
			cw.order[i] = r
			cw.local[i] = targets[r] - m.classStart[k]
			copy(cw.hs[i*K:(i+1)*K], w.head[r*K:(r+1)*K])
			next[k]++
		}
	}
	cw.wOff[0] = 0
	for k := 0; k < C; k++ {
		n := cw.off[k+1] - cw.off[k]
		s, e := m.classStart[k], m.classStart[k+1]
		nc := e - s
		cw.wOff[k+1] = cw.wOff[k] + n*nc
		if n == 0 {
			continue
		}
		ws := cw.ws[cw.wOff[k]:cw.wOff[k+1]]
		linalg.Gemm(p, false, true, n, nc, K, 1, cw.hs[cw.off[k]*K:], K, m.outW[s*K:], K, 0, ws, nc)
		bias := m.outB[s:e]
		for i := 0; i < n; i++ {
			row := ws[i*nc : (i+1)*nc]
			for j, b := range bias {
				row[j] += b
			}
		}
	}
}

// classLoss is loss for the class layer: the summed cross-entropy in nats
// of the positions whose target is not negative,
//
//	−ln P(w | h) = −ln softmax(s)[c(w)] − ln softmax(u)[w],
//
// leaving the gradients of the mean in cw.scores and cw.ws.
func (w *work[T]) classLoss(targets []int) (float64, int) {
	m, cw := w.m, w.cls
	p := cw.pool
	R := w.steps * w.B
	C := len(m.classStart) - 1
	w.classGroup(p, targets, R)
	count := cw.off[C]
	if count == 0 {
		clear(cw.scores[:R*C])
		return 0, 0
	}
	scale := T(1) / T(count)
	total := linalg.SoftmaxCrossEntropy(cw.scores[:R*C], cw.scores[:R*C], cw.ct, R, C, scale)
	for k := 0; k < C; k++ {
		n := cw.off[k+1] - cw.off[k]
		if n == 0 {
			continue
		}
		nc := m.classStart[k+1] - m.classStart[k]
		ws := cw.ws[cw.wOff[k]:cw.wOff[k+1]]
		total += linalg.SoftmaxCrossEntropy(ws, ws, cw.local[cw.off[k]:], n, nc, scale)
	}
	return total, count
}

// classBackward adds the class layer's parameter gradients of the last
// classLoss and writes ∂L/∂p, for the R rows p of w.head, to dh.
func (w *work[T]) classBackward(p *linalg.Pool, dh []T) {
	m, cw := w.m, w.cls
	R := w.steps * w.B
	C, K := len(m.classStart)-1, m.outIn
	ds := cw.scores[:R*C]
	colSumAdd(m.gClassB, ds, R, C, C)
	linalg.Gemm(p, true, false, C, K, R, 1, ds, C, w.head, K, 1, m.gClassW, K)
	linalg.Gemm(p, false, false, R, K, C, 1, ds, C, m.classW, K, 0, dh, K)
	for k := 0; k < C; k++ {
		n := cw.off[k+1] - cw.off[k]
		if n == 0 {
			continue
		}
		s, e := m.classStart[k], m.classStart[k+1]
		nc := e - s
		du := cw.ws[cw.wOff[k]:cw.wOff[k+1]]
		hs := cw.hs[cw.off[k]*K : cw.off[k+1]*K]
		dhs := cw.dhs[cw.off[k]*K : cw.off[k+1]*K]
		colSumAdd(m.gOutB[s:e], du, n, nc, nc)
		linalg.Gemm(p, true, false, nc, K, n, 1, du, nc, hs, K, 1, m.gOutW[s*K:e*K], K)
		linalg.Gemm(p, false, false, n, K, nc, 1, du, nc, m.outW[s*K:e*K], K, 0, dhs, K)
	}
	for i, r := range cw.order[:cw.off[C]] {
		row := dh[r*K : (r+1)*K]
		for j, v := range cw.dhs[i*K : (i+1)*K] {
			row[j] += v
		}
	}
}

// classLogProbs writes ln P(targets[r] | h_r) to dst[r] for every position
// r < R of the last forward pass with targets[r] ≥ 0, in float64.
func (w *work[T]) classLogProbs(p *linalg.Pool, dst []float64, targets []int, R int) {
	m, cw := w.m, w.cls
	C := len(m.classStart) - 1
	w.classGroup(p, targets, R)
	for k := 0; k < C; k++ {
		nc := m.classStart[k+1] - m.classStart[k]
		ws := cw.ws[cw.wOff[k]:cw.wOff[k+1]]
		for i := cw.off[k]; i < cw.off[k+1]; i++ {
			r := cw.order[i]
			row := ws[(i-cw.off[k])*nc : (i-cw.off[k]+1)*nc]
			dst[r] = logSoftmaxAt(cw.scores[r*C:(r+1)*C], k) + logSoftmaxAt(row, cw.local[i])
		}
	}
}
