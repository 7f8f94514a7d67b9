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
	for t := 0; t < steps; t++ {
		hp := lw.h[t*n : (t+1)*n]
		hn := lw.h[(t+1)*n : (t+2)*n]
		a := lw.xg[t*B*G : (t+1)*B*G]
		aux := lw.aux[t*n : (t+1)*n]
		if c.resetAfter {
			rec := lw.rec[:B*G]
			t0 := lw.times.start()
			linalg.Gemm(p, false, true, B, G, H, 1, hp, H, lp.wRec, H, 0, rec, G)
			lw.times.lap(PhaseRecurrence, t0)
			for b := 0; b < B; b++ {
				row, rr := a[b*G:(b+1)*G], rec[b*G:(b+1)*G]
				for j := 0; j < 2*H; j++ {
					row[j] += rr[j]
				}
				linalg.Sigmoid(row[:2*H], row[:2*H])
				r, xn := row[:H], row[2*H:]
				hnb := aux[b*H : (b+1)*H]
				for j := 0; j < H; j++ {
					hnb[j] = rr[2*H+j] + lp.bRec[j]
					xn[j] += r[j] * hnb[j]
				}
				linalg.Tanh(xn, xn)
			}
		} else {
			t0 := lw.times.start()
			linalg.Gemm(p, false, true, B, 2*H, H, 1, hp, H, lp.wRec[:2*H*H], H, 1, a, G)
			lw.times.lap(PhaseRecurrence, t0)
			for b := 0; b < B; b++ {
				row := a[b*G : (b+1)*G]
				linalg.Sigmoid(row[:2*H], row[:2*H])
				r := row[:H]
				hpb, rh := hp[b*H:(b+1)*H], aux[b*H:(b+1)*H]
				for j := 0; j < H; j++ {
					rh[j] = r[j] * hpb[j]
				}
			}
			t0 = lw.times.start()
			linalg.Gemm(p, false, true, B, H, H, 1, aux, H, lp.wRec[2*H*H:], H, 1, a[2*H:], G)
			lw.times.lap(PhaseRecurrence, t0)
			for b := 0; b < B; b++ {
				xn := a[b*G+2*H : (b+1)*G]
				linalg.Tanh(xn, xn)
			}
		}
		for b := 0; b < B; b++ {
			row := a[b*G : (b+1)*G]
			z, nn := row[H:2*H], row[2*H:]
			hpb, hb := hp[b*H:(b+1)*H], hn[b*H:(b+1)*H]
			for j := 0; j < H; j++ {
				hb[j] = (1-z[j])*nn[j] + z[j]*hpb[j]
			}
		}
	}
}

func (c *gruCell[T]) backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int) {
	H := lp.hid
	G := 3 * H
	n := B * H
	dnext := lw.dnext[:n]
	clear(dnext)
	for t := steps - 1; t >= 0; t-- {
		a := lw.xg[t*B*G : (t+1)*B*G]
		d := lw.dxg[t*B*G : (t+1)*B*G]
		hp := lw.h[t*n : (t+1)*n]
		aux := lw.aux[t*n : (t+1)*n]
		dhs := lw.dh[t*n : (t+1)*n]
		for b := 0; b < B; b++ {
			row, drow := a[b*G:(b+1)*G], d[b*G:(b+1)*G]
			r, z, nn := row[:H], row[H:2*H], row[2*H:]
			dr, dz, dn := drow[:H], drow[H:2*H], drow[2*H:]
			off := b * H
			hpb, dh, dnx, ab := hp[off:off+H], dhs[off:off+H], dnext[off:off+H], aux[off:off+H]
			for j := 0; j < H; j++ {
				gh := dh[j] + dnx[j]
				dnp := gh * (1 - z[j]) * (1 - nn[j]*nn[j])
				dz[j] = gh * (hpb[j] - nn[j]) * z[j] * (1 - z[j])
				dn[j] = dnp
				dnx[j] = gh * z[j]
				if c.resetAfter {
					dr[j] = dnp * ab[j] * r[j] * (1 - r[j]) // ab = U_n h + b_hn
				}
			}
		}
		if c.resetAfter {
			// The recurrent pre-activation gradient differs from the input
			// one only in the n block, which r scales.
			drg := lw.drg[t*B*G : (t+1)*B*G]
			for b := 0; b < B; b++ {
				row, drow, rrow := a[b*G:(b+1)*G], d[b*G:(b+1)*G], drg[b*G:(b+1)*G]
				copy(rrow[:2*H], drow[:2*H])
				for j := 0; j < H; j++ {
					rrow[2*H+j] = drow[2*H+j] * row[j]
				}
			}
			linalg.Gemm(p, false, false, B, H, G, 1, drg, G, lp.wRec, H, 1, dnext, H)
		} else {
			// ∂L/∂(r⊙h) = δn U_n, then through r and h_{t−1}.
			drh := lw.tmp[:n]
			linalg.Gemm(p, false, false, B, H, H, 1, d[2*H:], G, lp.wRec[2*H*H:], H, 0, drh, H)
			for b := 0; b < B; b++ {
				row, drow := a[b*G:(b+1)*G], d[b*G:(b+1)*G]
				r := row[:H]
				off := b * H
				for j := 0; j < H; j++ {
					g := drh[off+j]
					drow[j] = g * hp[off+j] * r[j] * (1 - r[j])
					dnext[off+j] += g * r[j]
				}
			}
			linalg.Gemm(p, false, false, B, H, 2*H, 1, d, G, lp.wRec[:2*H*H], H, 1, dnext, H)
		}
	}
	sB := steps * B
	if c.resetAfter {
		linalg.Gemm(p, true, false, G, H, sB, 1, lw.drg, G, lw.h, H, 1, lp.gwRec, H)
		colSumAdd(lp.gbRec, lw.drg[2*H:], sB, H, G)
	} else {
		linalg.Gemm(p, true, false, 2*H, H, sB, 1, lw.dxg, G, lw.h, H, 1, lp.gwRec[:2*H*H], H)
		linalg.Gemm(p, true, false, H, H, sB, 1, lw.dxg[2*H:], G, lw.aux, H, 1, lp.gwRec[2*H*H:], H)
	}
}
