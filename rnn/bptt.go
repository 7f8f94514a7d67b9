package rnn

import (
	"math/rand/v2"

	"weft/rnn/linalg"
)

// layerWork holds one layer's buffers for a window of up to maxSteps steps
// over B streams. Row blocks are time-major: block t holds the B rows of
// step t.
type layerWork[T Float] struct {
	in   []T // the layer's input rows (a view), nil for one-hot input
	out  []T // the layer's output rows after dropout (a view)
	mask []T // dropout mask on the output, nil when off
	drop []T // storage for out when dropout is on

	xg  []T // steps·B×G: input part of the pre-activations, then the gate activations
	h   []T // (steps+1)·B×H: block 0 is the carried state
	c   []T // (steps+1)·B×H: LSTM cell state
	aux []T // steps·B×H: tanh(c) (LSTM), U_n h+b_hn or r⊙h (GRU)
	rec []T // B×G: recurrent product (GRU reset_after)

	// Backward only.
	dh     []T // steps·B×H: ∂L/∂h_t from above
	dxg    []T // steps·B×G: ∂L/∂(input pre-activations)
	drg    []T // steps·B×G: ∂L/∂(recurrent pre-activations) (GRU reset_after)
	dnext  []T // B×H
	dcnext []T // B×H
	tmp    []T // B×H

	times *PhaseTimes // nil: timing off (see Trainer.SetPhaseTimes)

	cw cellWork[T] // the cell's packed weights and loop state (cell.go)
}

// work is everything a forward (and backward) pass over one window needs
// besides the parameters. Buffers are sized once; passes allocate nothing.
type work[T Float] struct {
	m        *Model[T]
	B, max   int
	train    bool // backward buffers allocated
	dropping bool // dropout masks in use for the current pass

	x, xMask []T // max·B×E embedding rows (after dropout), its mask
	layers   []layerWork[T]
	projOut  []T // max·B×P
	logits   []T // max·B×V; after the loss, ∂L/∂logits (class layer: nil, or the log-probabilities when full)
	dHead    []T // max·B×outIn (when a projection exists)
	dx       []T // max·B×E
	head     []T // view: the output layer's input rows of the last pass
	steps    int
	inputs   []int
	times    *PhaseTimes // nil: timing off

	cls  *classWork[T] // class layer buffers, nil for the full softmax
	full bool          // class layer: also compute the whole distribution into logits (Streams)

	// inTable, when set (by a BatchScorer, for passes without dropout), is
	// the first layer's input pre-activations of every token id, V×G:
	// forward copies a token's row instead of computing it.
	inTable []T
}

// newWork sizes buffers for B streams and up to maxSteps steps. With train
// set, the backward and dropout buffers are allocated too.
func newWork[T Float](m *Model[T], B, maxSteps int, train bool) *work[T] {
	c := m.cfg
	w := &work[T]{m: m, B: B, max: maxSteps, train: train}
	R := B * maxSteps
	E, H := c.EmbeddingSize, c.HiddenSize
	drop := train && c.Dropout > 0
	if E > 0 {
		w.x = make([]T, R*E)
		if drop {
			w.xMask = make([]T, R*E)
		}
		if train {
			w.dx = make([]T, R*E)
		}
	}
	w.layers = make([]layerWork[T], len(m.layers))
	for l := range w.layers {
		lw, lp := &w.layers[l], &m.layers[l]
		lw.xg = make([]T, R*lp.g)
		lw.h = make([]T, (maxSteps+1)*B*H)
		if m.cell.hasCellState() {
			lw.c = make([]T, (maxSteps+1)*B*H)
		}
		if m.cfg.Cell != "rnn" {
			lw.aux = make([]T, R*H)
		}
		if m.cell.hasRecurrentBias() {
			lw.rec = make([]T, B*lp.g)
		}
		if drop {
			lw.mask = make([]T, R*H)
			lw.drop = make([]T, R*H)
		}
		if train {
			lw.dh = make([]T, R*H)
			lw.dxg = make([]T, R*lp.g)
			if m.cell.hasRecurrentBias() {
				lw.drg = make([]T, R*lp.g)
			}
			lw.dnext = make([]T, B*H)
			lw.dcnext = make([]T, B*H)
			lw.tmp = make([]T, B*H)
		}
	}
	if c.ProjectionSize > 0 {
		w.projOut = make([]T, R*c.ProjectionSize)
		if train {
			w.dHead = make([]T, R*c.ProjectionSize)
		}
	}
	if m.classStart != nil {
		w.cls = newClassWork(m, R, train)
	} else {
		w.logits = make([]T, R*m.vocab)
	}
	return w
}

// floats is the number of scalars newWork allocates: the "stored
// activations" term of the memory formula in the package documentation.
func (w *work[T]) floats() int {
	n := len(w.x) + len(w.xMask) + len(w.dx) + len(w.projOut) + len(w.logits) + len(w.dHead)
	if w.cls != nil {
		n += w.cls.floats()
	}
	for _, lw := range w.layers {
		n += len(lw.xg) + len(lw.h) + len(lw.c) + len(lw.aux) + len(lw.rec) + len(lw.mask) + len(lw.drop) +
			len(lw.dh) + len(lw.dxg) + len(lw.drg) + len(lw.dnext) + len(lw.dcnext) + len(lw.tmp)
	}
	return n
}

// drawMasks draws fresh inverted-dropout masks for a pass of steps steps:
// each unit is kept with probability 1−p and then scaled by 1/(1−p), so
// evaluation needs no rescaling. It draws one Float64 per unit, embedding
// first, then each layer's output, time-major.
func (w *work[T]) drawMasks(rng *rand.Rand, steps int) {
	p := w.m.cfg.Dropout
	if !w.train || p == 0 {
		return
	}
	keep := T(1 / (1 - p))
	fill := func(mask []T) {
		for i := range mask {
			if rng.Float64() < p {
				mask[i] = 0
			} else {
				mask[i] = keep
			}
		}
	}
	R := steps * w.B
	if w.xMask != nil {
		fill(w.xMask[:R*w.m.cfg.EmbeddingSize])
	}
	for l := range w.layers {
		fill(w.layers[l].mask[:R*w.m.cfg.HiddenSize])
	}
}

// forward runs the model over inputs (steps·B ids, time-major) from the
// carried state and leaves the logits of every position in w.logits. With
// dropout set, the masks of the last drawMasks call are applied.
func (w *work[T]) forward(p *linalg.Pool, inputs []int, steps int, dropout bool) {
	m := w.m
	B, R := w.B, steps*w.B
	E, H := m.cfg.EmbeddingSize, m.cfg.HiddenSize
	w.steps, w.inputs = steps, inputs
	w.dropping = dropout && w.train && m.cfg.Dropout > 0
	t0 := w.times.start()
	var in []T
	table := w.inTable
	if w.dropping {
		table = nil
	}
	if E > 0 && table == nil {
		x := w.x[:R*E]
		for r, tok := range inputs[:R] {
			copy(x[r*E:(r+1)*E], m.emb[tok*E:(tok+1)*E])
		}
		if w.dropping {
			mulInto(x, x, w.xMask[:R*E])
		}
		in = x
	}
	for l := range w.layers {
		lw, lp := &w.layers[l], &m.layers[l]
		G := lp.g
		xg := lw.xg[:R*G]
		lw.in = in
		if l == 0 && table != nil {
			for r, tok := range inputs[:R] {
				copy(xg[r*G:(r+1)*G], table[tok*G:(tok+1)*G])
			}
		} else if in != nil {
			linalg.Gemm(p, false, true, R, G, lp.in, 1, in, lp.in, lp.wIn, lp.in, 0, xg, G)
			addRowsPool(p, &lw.cw.mat, xg, lp.bias, R, G, G)
		} else {
			V := lp.in
			for r, tok := range inputs[:R] {
				row := xg[r*G : (r+1)*G]
				for j := range row {
					row[j] = lp.wIn[j*V+tok] + lp.bias[j]
				}
			}
		}
		t0 = w.times.lap(PhaseInput, t0)
		recBefore := w.times.get(PhaseRecurrence)
		m.cell.forward(p, lp, lw, steps, B)
		t0 = w.times.lapGates(t0, recBefore)
		hs := lw.h[B*H : (steps+1)*B*H]
		if w.dropping {
			lw.out = lw.drop[:R*H]
			mulInto(lw.out, hs, lw.mask[:R*H])
		} else {
			lw.out = hs
		}
		in = lw.out
	}
	t0 = w.times.lap(PhaseInput, t0)
	head := in
	if m.proj != nil {
		P := m.cfg.ProjectionSize
		linalg.Gemm(p, false, true, R, P, H, 1, in, H, m.proj, H, 0, w.projOut[:R*P], P)
		head = w.projOut[:R*P]
	}
	w.head = head
	if w.cls != nil {
		w.classForward(p, R)
	} else {
		V, K := m.vocab, m.outIn
		logits := w.logits[:R*V]
		linalg.Gemm(p, false, true, R, V, K, 1, head, K, m.outW, K, 0, logits, V)
		addRowsPool(p, &w.layers[len(w.layers)-1].cw.mat, logits, m.outB, R, V, V)
	}
	w.times.lap(PhaseOutput, t0)
}

// loss turns w.logits into ∂L/∂logits for the mean cross-entropy over the
// positions whose target is not negative, and returns the summed loss in
// nats and the number of positions counted.
func (w *work[T]) loss(targets []int) (float64, int) {
	if w.cls != nil {
		return w.classLoss(targets)
	}
	R := w.steps * w.B
	count := 0
	for _, t := range targets[:R] {
		if t >= 0 {
			count++
		}
	}
	if count == 0 {
		clear(w.logits[:R*w.m.vocab])
		return 0, 0
	}
	lg := w.logits[:R*w.m.vocab]
	total := linalg.SoftmaxCrossEntropy(lg, lg, targets[:R], R, w.m.vocab, T(1)/T(count))
	return total, count
}

// backward adds to the model's gradients those of the loss whose gradient
// with respect to the logits is in w.logits (see loss), for the pass that
// forward last ran. It does not clear the gradients first.
func (w *work[T]) backward(p *linalg.Pool) {
	m := w.m
	B, steps := w.B, w.steps
	R := steps * B
	E, H := m.cfg.EmbeddingSize, m.cfg.HiddenSize
	V, K := m.vocab, m.outIn
	L := len(w.layers)
	top := &w.layers[L-1]
	dTop := top.dh[:R*H]
	dHead := dTop // ∂L/∂(the output layer's input)
	if m.proj != nil {
		dHead = w.dHead[:R*K]
	}
	if w.cls != nil {
		w.classBackward(p, dHead)
	} else {
		dl := w.logits[:R*V]
		colSumAddPool(p, &top.cw.mat, m.gOutB, dl, R, V, V)
		linalg.Gemm(p, true, false, V, K, R, 1, dl, V, w.head, K, 1, m.gOutW, K)
		linalg.Gemm(p, false, false, R, K, V, 1, dl, V, m.outW, K, 0, dHead, K)
	}
	if m.proj != nil {
		P := m.cfg.ProjectionSize
		linalg.Gemm(p, true, false, P, H, R, 1, dHead, P, top.out, H, 1, m.gProj, H)
		linalg.Gemm(p, false, false, R, H, P, 1, dHead, P, m.proj, H, 0, dTop, H)
	}
	if w.dropping {
		mulInto(dTop, dTop, top.mask[:R*H])
	}
	for l := L - 1; l >= 0; l-- {
		lw, lp := &w.layers[l], &m.layers[l]
		G := lp.g
		m.cell.backward(p, lp, lw, steps, B)
		dxg := lw.dxg[:R*G]
		colSumAddPool(p, &lw.cw.mat, lp.gBias, dxg, R, G, G)
		if lw.in == nil {
			Vin := lp.in
			for r, tok := range w.inputs[:R] {
				row := dxg[r*G : (r+1)*G]
				for j, g := range row {
					lp.gwIn[j*Vin+tok] += g
				}
			}
			continue
		}
		linalg.Gemm(p, true, false, G, lp.in, R, 1, dxg, G, lw.in, lp.in, 1, lp.gwIn, lp.in)
		if l > 0 {
			below := &w.layers[l-1]
			din := below.dh[:R*H]
			linalg.Gemm(p, false, false, R, H, G, 1, dxg, G, lp.wIn, H, 0, din, H)
			if w.dropping {
				mulInto(din, din, below.mask[:R*H])
			}
			continue
		}
		dx := w.dx[:R*E]
		linalg.Gemm(p, false, false, R, E, G, 1, dxg, G, lp.wIn, E, 0, dx, E)
		if w.dropping {
			mulInto(dx, dx, w.xMask[:R*E])
		}
		for r, tok := range w.inputs[:R] {
			g := m.gEmb[tok*E : (tok+1)*E]
			for j, v := range dx[r*E : (r+1)*E] {
				g[j] += v
			}
		}
	}
}

// carry makes the state after step k of the last pass the carried state
// (block 0) of the next one.
func (w *work[T]) carry(k int) {
	if k == 0 {
		return
	}
	n := w.B * w.m.cfg.HiddenSize
	for l := range w.layers {
		lw := &w.layers[l]
		copy(lw.h[:n], lw.h[k*n:(k+1)*n])
		if lw.c != nil {
			copy(lw.c[:n], lw.c[k*n:(k+1)*n])
		}
	}
}

// resetStreams zeroes the carried state of every stream b with reset[b].
func (w *work[T]) resetStreams(reset []bool) {
	H := w.m.cfg.HiddenSize
	for b, r := range reset {
		if !r {
			continue
		}
		for l := range w.layers {
			lw := &w.layers[l]
			clear(lw.h[b*H : (b+1)*H])
			if lw.c != nil {
				clear(lw.c[b*H : (b+1)*H])
			}
		}
	}
}

// resetAll zeroes the carried state of every stream.
func (w *work[T]) resetAll() {
	n := w.B * w.m.cfg.HiddenSize
	for l := range w.layers {
		clear(w.layers[l].h[:n])
		if w.layers[l].c != nil {
			clear(w.layers[l].c[:n])
		}
	}
}

// mulInto sets dst[i] = a[i]·b[i].
func mulInto[T Float](dst, a, b []T) {
	for i := range dst {
		dst[i] = a[i] * b[i]
	}
}
