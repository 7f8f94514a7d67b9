package rnn

import "weft/rnn/linalg"

// lstmCell is the long short-term memory cell with forget gate of Gers,
// Schmidhuber & Cummins (2000), without peepholes:
//
//	i_t = σ(W_i x_t + U_i h_{t−1} + b_i)
//	f_t = σ(W_f x_t + U_f h_{t−1} + b_f)
//	g_t = tanh(W_g x_t + U_g h_{t−1} + b_g)
//	o_t = σ(W_o x_t + U_o h_{t−1} + b_o)
//	c_t = f_t ⊙ c_{t−1} + i_t ⊙ g_t
//	h_t = o_t ⊙ tanh(c_t)
//
// Gate layout: blocks i, f, g, o (the order general frameworks use).
type lstmCell[T Float] struct{}

func (c *lstmCell[T]) Name() string           { return "lstm" }
func (c *lstmCell[T]) Gates() int             { return 4 }
func (c *lstmCell[T]) hasCellState() bool     { return true }
func (c *lstmCell[T]) hasRecurrentBias() bool { return false }
func (c *lstmCell[T]) initBias(b []T, hid int, forgetBias float64) {
	for j := hid; j < 2*hid; j++ {
		b[j] = T(forgetBias)
	}
}

func (c *lstmCell[T]) forward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	G := 4 * H
	n := B * H
	rp := &lw.cw.pack[0]
	packRec(rp, steps, true, H, G, lp.wRec, H)
	for t := 0; t < steps; t++ {
		hp := lw.h[t*n : (t+1)*n]
		a := lw.xg[t*B*G : (t+1)*B*G]
		t0 := lw.times.start()
		mulRec(p, rp, true, B, G, H, hp, H, lp.wRec, H, 1, a, G)
		lw.times.lap(PhaseRecurrence, t0)
		forRows(p, lp, lw, t, B, G, lstmForwardPass)
	}
}

// lstmForwardRows computes the gates, c_t, tanh(c_t) and h_t of rows
// [lo, hi) of step r.t from the pre-activations in lw.xg.
func lstmForwardRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 4 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	for b := lo; b < hi; b++ {
		row := a[b*G : (b+1)*G]
		linalg.Sigmoid(row[:2*H], row[:2*H])
		linalg.Tanh(row[2*H:3*H], row[2*H:3*H])
		linalg.Sigmoid(row[3*H:], row[3*H:])
		i, f, g, o := row[:H], row[H:2*H], row[2*H:3*H], row[3*H:]
		off := b * H
		cp := lw.c[t*n+off : t*n+off+H]
		cn := lw.c[(t+1)*n+off : (t+1)*n+off+H]
		linalg.MulAddMul(cn, f, cp, i, g) // c_t = f⊙c_{t−1} + i⊙g
		tcb := lw.aux[t*n+off : t*n+off+H]
		linalg.Tanh(tcb, cn)
		hb := lw.h[(t+1)*n+off : (t+1)*n+off+H]
		linalg.Mul(hb, o, tcb) // h_t = o⊙tanh(c_t)
	}
}

func (c *lstmCell[T]) backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	G := 4 * H
	n := B * H
	clear(lw.dnext[:n])
	clear(lw.dcnext[:n])
	rp := &lw.cw.pack[1]
	packRec(rp, steps, false, G, H, lp.wRec, H)
	for t := steps - 1; t >= 0; t-- {
		forRows(p, lp, lw, t, B, G, lstmBackwardPass)
		d := lw.dxg[t*B*G : (t+1)*B*G]
		mulRec(p, rp, false, B, H, G, d, G, lp.wRec, H, 0, lw.dnext[:n], H)
	}
	linalg.Gemm(p, true, false, G, H, steps*B, 1, lw.dxg, G, lw.h, H, 1, lp.gwRec, H)
}

// lstmBackwardRows computes the pre-activation gradients of rows [lo, hi)
// of step r.t into lw.dxg and carries ∂L/∂c back in lw.dcnext
// (linalg.LSTMGateGrads has the equations).
func lstmBackwardRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 4 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	d := lw.dxg[t*B*G : (t+1)*B*G]
	for b := lo; b < hi; b++ {
		off := b * H
		linalg.LSTMGateGrads(d[b*G:(b+1)*G], a[b*G:(b+1)*G], lw.dh[t*n+off:t*n+off+H], lw.dnext[off:off+H],
			lw.dcnext[off:off+H], lw.aux[t*n+off:t*n+off+H], lw.c[t*n+off:t*n+off+H])
	}
}
