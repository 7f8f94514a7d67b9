package rnn

import "weft/rnn/linalg"

// vanillaCell is the simple recurrent network of Elman (1990):
//
//	h_t = φ(W x_t + U h_{t−1} + b)
//
// with φ = tanh, or φ = max(0, ·) (ReLU). Gate layout: one block.
type vanillaCell[T Float] struct{ relu bool }

func (c *vanillaCell[T]) Name() string {
	if c.relu {
		return "rnn-relu"
	}
	return "rnn-tanh"
}
func (c *vanillaCell[T]) Gates() int                         { return 1 }
func (c *vanillaCell[T]) hasCellState() bool                 { return false }
func (c *vanillaCell[T]) hasRecurrentBias() bool             { return false }
func (c *vanillaCell[T]) initBias(b []T, hid int, _ float64) {}

func (c *vanillaCell[T]) forward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	n := B * H
	rp := &lw.cw.pack[0]
	packRec(rp, steps, true, H, H, lp.wRec, H)
	pass := vanillaForwardPass
	if c.relu {
		pass = vanillaForwardReLUPass
	}
	for t := 0; t < steps; t++ {
		hp := lw.h[t*n : (t+1)*n]
		a := lw.xg[t*n : (t+1)*n]
		t0 := lw.times.start()
		mulRec(p, rp, true, B, H, H, hp, H, lp.wRec, H, 1, a, H)
		lw.times.lap(PhaseRecurrence, t0)
		forRows(p, lp, lw, t, B, H, pass)
	}
}

// vanillaForwardRows sets h_t = φ(a) for rows [lo, hi) of step r.t.
func vanillaForwardRows[T Float](r *rowLoop[T], lo, hi int, relu bool) {
	lw, t := r.lw, r.t
	H := r.lp.hid
	n := r.B * H
	a := lw.xg[t*n+lo*H : t*n+hi*H]
	hn := lw.h[(t+1)*n+lo*H : (t+1)*n+hi*H]
	if relu {
		for i, v := range a {
			hn[i] = max(v, 0)
		}
		return
	}
	linalg.Tanh(hn, a)
}

func (c *vanillaCell[T]) backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	n := B * H
	dnext := lw.dnext[:n]
	clear(dnext)
	rp := &lw.cw.pack[1]
	packRec(rp, steps, false, H, H, lp.wRec, H)
	pass := vanillaBackwardPass
	if c.relu {
		pass = vanillaBackwardReLUPass
	}
	for t := steps - 1; t >= 0; t-- {
		forRows(p, lp, lw, t, B, H, pass)
		mulRec(p, rp, false, B, H, H, lw.dxg[t*n:(t+1)*n], H, lp.wRec, H, 0, dnext, H)
	}
	// ∂L/∂U = Σ_t δ_tᵀ h_{t−1}, one product over all steps.
	linalg.Gemm(p, true, false, H, H, steps*B, 1, lw.dxg, H, lw.h, H, 1, lp.gwRec, H)
}

// vanillaBackwardRows sets δ_t = (∂L/∂h_t)·φ′ for rows [lo, hi) of step r.t.
func vanillaBackwardRows[T Float](r *rowLoop[T], lo, hi int, relu bool) {
	lw, t := r.lw, r.t
	H := r.lp.hid
	n := r.B * H
	dh := lw.dh[t*n+lo*H : t*n+hi*H]
	h := lw.h[(t+1)*n+lo*H : (t+1)*n+hi*H]
	d := lw.dxg[t*n+lo*H : t*n+hi*H]
	dnext := lw.dnext[lo*H : hi*H]
	if relu {
		for i := range d {
			g := dh[i] + dnext[i]
			if h[i] <= 0 {
				g = 0
			}
			d[i] = g
		}
		return
	}
	for i := range d {
		d[i] = (dh[i] + dnext[i]) * (1 - h[i]*h[i])
	}
}
