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
	for t := 0; t < steps; t++ {
		hp := lw.h[t*n : (t+1)*n]
		a := lw.xg[t*n : (t+1)*n]
		t0 := lw.times.start()
		linalg.Gemm(p, false, true, B, H, H, 1, hp, H, lp.wRec, H, 1, a, H)
		lw.times.lap(PhaseRecurrence, t0)
		hn := lw.h[(t+1)*n : (t+2)*n]
		if c.relu {
			for i, v := range a {
				hn[i] = max(v, 0)
			}
		} else {
			linalg.Tanh(hn, a)
		}
	}
}

func (c *vanillaCell[T]) backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	n := B * H
	dnext := lw.dnext[:n]
	clear(dnext)
	for t := steps - 1; t >= 0; t-- {
		dh := lw.dh[t*n : (t+1)*n]
		h := lw.h[(t+1)*n : (t+2)*n]
		d := lw.dxg[t*n : (t+1)*n]
		if c.relu {
			for i := range d {
				g := dh[i] + dnext[i]
				if h[i] <= 0 {
					g = 0
				}
				d[i] = g
			}
		} else {
			for i := range d {
				d[i] = (dh[i] + dnext[i]) * (1 - h[i]*h[i])
			}
		}
		linalg.Gemm(p, false, false, B, H, H, 1, d, H, lp.wRec, H, 0, dnext, H)
	}
	// ∂L/∂U = Σ_t δ_tᵀ h_{t−1}, one product over all steps.
	linalg.Gemm(p, true, false, H, H, steps*B, 1, lw.dxg, H, lw.h, H, 1, lp.gwRec, H)
}
