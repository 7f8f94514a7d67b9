package rnn

import "weft/rnn/linalg"

// gruCell is the gated recurrent unit of Cho et al. (2014). Both published
// forms share
//
//	r_t = σ(W_r x_t + U_r h_{t−1} + b_r)
//	z_t = σ(W_z x_t + U_z h_{t−1} + b_z)
//	h_t = (1 − z_t) ⊙ n_t + z_t ⊙ h_{t−1}
//
// and differ in the candidate n_t. Reset after the recurrent product (the
// form general frameworks use, and weft's default):
//
//	n_t = tanh(W_n x_t + b_n + r_t ⊙ (U_n h_{t−1} + b_hn))
//
// Reset before it (Cho et al. 2014, eq. 8, where n_t is h̃):
//
//	n_t = tanh(W_n x_t + b_n + U_n (r_t ⊙ h_{t−1}))
//
// Gate layout: blocks r, z, n. Only the reset-after form has the recurrent
// bias b_hn.
type gruCell[T Float] struct{ resetAfter bool }

func (c *gruCell[T]) Name() string {
	if c.resetAfter {
		return "gru"
	}
	return "gru-reset-before"
}
func (c *gruCell[T]) Gates() int                         { return 3 }
func (c *gruCell[T]) hasCellState() bool                 { return false }
func (c *gruCell[T]) hasRecurrentBias() bool             { return c.resetAfter }
func (c *gruCell[T]) initBias(b []T, hid int, _ float64) {}

func (c *gruCell[T]) forward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	G := 3 * H
	n := B * H
	rz, rn := &lw.cw.pack[0], &lw.cw.pack[2]
	if c.resetAfter {
		packRec(rz, steps, true, H, G, lp.wRec, H)
	} else {
		packRec(rz, steps, true, H, 2*H, lp.wRec[:2*H*H], H)
		packRec(rn, steps, true, H, H, lp.wRec[2*H*H:], H)
	}
	for t := 0; t < steps; t++ {
		hp := lw.h[t*n : (t+1)*n]
		a := lw.xg[t*B*G : (t+1)*B*G]
		if c.resetAfter {
			t0 := lw.times.start()
			mulRec(p, rz, true, B, G, H, hp, H, lp.wRec, H, 0, lw.rec[:B*G], G)
			lw.times.lap(PhaseRecurrence, t0)
			forRows(p, lp, lw, t, B, G, gruForwardAfterPass)
			continue
		}
		t0 := lw.times.start()
		mulRec(p, rz, true, B, 2*H, H, hp, H, lp.wRec[:2*H*H], H, 1, a, G)
		lw.times.lap(PhaseRecurrence, t0)
		forRows(p, lp, lw, t, B, 2*H, gruForwardBeforeRPass)
		t0 = lw.times.start()
		mulRec(p, rn, true, B, H, H, lw.aux[t*n:(t+1)*n], H, lp.wRec[2*H*H:], H, 1, a[2*H:], G)
		lw.times.lap(PhaseRecurrence, t0)
		forRows(p, lp, lw, t, B, H, gruForwardBeforeHPass)
	}
}

// gruForwardAfterRows computes the gates and h_t of rows [lo, hi) of step
// r.t for the reset-after form, from the input pre-activations in lw.xg and
// the recurrent product in lw.rec.
func gruForwardAfterRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, lp, t, B := r.lw, r.lp, r.t, r.B
	H := lp.hid
	G := 3 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	hp, hn, aux, rec := lw.h[t*n:(t+1)*n], lw.h[(t+1)*n:(t+2)*n], lw.aux[t*n:(t+1)*n], lw.rec[:B*G]
	for b := lo; b < hi; b++ {
		row, rr := a[b*G:(b+1)*G], rec[b*G:(b+1)*G]
		for j := 0; j < 2*H; j++ {
			row[j] += rr[j]
		}
		linalg.Sigmoid(row[:2*H], row[:2*H])
		rg, xn := row[:H], row[2*H:]
		hnb := aux[b*H : (b+1)*H]
		rn, bRec := rr[2*H:3*H], lp.bRec[:H]
		rg, xn, rn, bRec = rg[:len(hnb)], xn[:len(hnb)], rn[:len(hnb)], bRec[:len(hnb)]
		for j := range hnb {
			hnb[j] = rn[j] + bRec[j]
			xn[j] += rg[j] * hnb[j]
		}
		linalg.Tanh(xn, xn)
		gruNewState(row, hp[b*H:(b+1)*H], hn[b*H:(b+1)*H], H)
	}
}

// gruForwardBeforeRRows computes r and z of rows [lo, hi) of step r.t for
// the reset-before form, and r ⊙ h_{t−1} into lw.aux.
func gruForwardBeforeRRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 3 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	hp, aux := lw.h[t*n:(t+1)*n], lw.aux[t*n:(t+1)*n]
	for b := lo; b < hi; b++ {
		row := a[b*G : (b+1)*G]
		linalg.Sigmoid(row[:2*H], row[:2*H])
		rg := row[:H]
		hpb, rh := hp[b*H:(b+1)*H], aux[b*H:(b+1)*H]
		for j := 0; j < H; j++ {
			rh[j] = rg[j] * hpb[j]
		}
	}
}

// gruForwardBeforeHRows computes n and h_t of rows [lo, hi) of step r.t for
// the reset-before form.
func gruForwardBeforeHRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 3 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	hp, hn := lw.h[t*n:(t+1)*n], lw.h[(t+1)*n:(t+2)*n]
	for b := lo; b < hi; b++ {
		row := a[b*G : (b+1)*G]
		xn := row[2*H:]
		linalg.Tanh(xn, xn)
		gruNewState(row, hp[b*H:(b+1)*H], hn[b*H:(b+1)*H], H)
	}
}

// gruNewState sets hb = (1 − z) ⊙ n + z ⊙ h_{t−1} for one row of gates.
func gruNewState[T Float](row, hpb, hb []T, H int) {
	z, nn := row[H:2*H], row[2*H:3*H]
	hpb, hb = hpb[:H], hb[:H]
	z, nn = z[:len(hb)], nn[:len(hb)]
	for j := range hb {
		hb[j] = (1-z[j])*nn[j] + z[j]*hpb[j]
	}
}

func (c *gruCell[T]) backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	G := 3 * H
	n := B * H
	dnext := lw.dnext[:n]
	clear(dnext)
	rz, rn := &lw.cw.pack[1], &lw.cw.pack[3]
	if c.resetAfter {
		packRec(rz, steps, false, G, H, lp.wRec, H)
	} else {
		packRec(rz, steps, false, 2*H, H, lp.wRec[:2*H*H], H)
		packRec(rn, steps, false, H, H, lp.wRec[2*H*H:], H)
	}
	for t := steps - 1; t >= 0; t-- {
		d := lw.dxg[t*B*G : (t+1)*B*G]
		if c.resetAfter {
			forRows(p, lp, lw, t, B, G, gruBackwardAfterPass)
			drg := lw.drg[t*B*G : (t+1)*B*G]
			mulRec(p, rz, false, B, H, G, drg, G, lp.wRec, H, 1, dnext, H)
			continue
		}
		forRows(p, lp, lw, t, B, G, gruBackwardBeforeZPass)
		// ∂L/∂(r⊙h) = δn U_n, then through r and h_{t−1}.
		mulRec(p, rn, false, B, H, H, d[2*H:], G, lp.wRec[2*H*H:], H, 0, lw.tmp[:n], H)
		forRows(p, lp, lw, t, B, H, gruBackwardBeforeRPass)
		mulRec(p, rz, false, B, H, 2*H, d, G, lp.wRec[:2*H*H], H, 1, dnext, H)
	}
	sB := steps * B
	if c.resetAfter {
		linalg.Gemm(p, true, false, G, H, sB, 1, lw.drg, G, lw.h, H, 1, lp.gwRec, H)
		colSumAddPool(p, &lw.cw.mat, lp.gbRec, lw.drg[2*H:], sB, H, G)
	} else {
		linalg.Gemm(p, true, false, 2*H, H, sB, 1, lw.dxg, G, lw.h, H, 1, lp.gwRec[:2*H*H], H)
		linalg.Gemm(p, true, false, H, H, sB, 1, lw.dxg[2*H:], G, lw.aux, H, 1, lp.gwRec[2*H*H:], H)
	}
}

// gruBackwardRows computes ∂L/∂z, ∂L/∂n (and for the reset-after form
// ∂L/∂r and the recurrent pre-activation gradient in lw.drg) of rows
// [lo, hi) of step r.t, and the part of ∂L/∂h_{t−1} that flows through z
// (linalg.GRUGateGrads has the equations).
func gruBackwardRows[T Float](r *rowLoop[T], lo, hi int, resetAfter bool) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 3 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	d := lw.dxg[t*B*G : (t+1)*B*G]
	for b := lo; b < hi; b++ {
		off := b * H
		var rrow []T // nil: the reset-before form
		if resetAfter {
			rrow = lw.drg[t*B*G+b*G : t*B*G+(b+1)*G]
		}
		linalg.GRUGateGrads(d[b*G:(b+1)*G], rrow, a[b*G:(b+1)*G], lw.dh[t*n+off:t*n+off+H],
			lw.dnext[off:off+H], lw.h[t*n+off:t*n+off+H], lw.aux[t*n+off:t*n+off+H])
	}
}

// gruBackwardBeforeRRows takes ∂L/∂(r⊙h_{t−1}) of rows [lo, hi) of step
// r.t (in lw.tmp) through r into ∂L/∂r and through h_{t−1} into lw.dnext,
// for the reset-before form.
func gruBackwardBeforeRRows[T Float](r *rowLoop[T], lo, hi int) {
	lw, t, B := r.lw, r.t, r.B
	H := r.lp.hid
	G := 3 * H
	n := B * H
	a := lw.xg[t*B*G : (t+1)*B*G]
	d := lw.dxg[t*B*G : (t+1)*B*G]
	hp := lw.h[t*n : (t+1)*n]
	drh, dnext := lw.tmp[:n], lw.dnext[:n]
	for b := lo; b < hi; b++ {
		row, drow := a[b*G:(b+1)*G], d[b*G:(b+1)*G]
		rg := row[:H]
		off := b * H
		for j := 0; j < H; j++ {
			g := drh[off+j]
			drow[j] = g * hp[off+j] * rg[j] * (1 - rg[j])
			dnext[off+j] += g * rg[j]
		}
	}
}
