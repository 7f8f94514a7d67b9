package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestGRUGateGrads checks GRUGateGrads against the backward step of a GRU
// cell written out in float64 (the equations of its doc comment, the
// derivative of the forward equations of Cho et al. 2014, both forms), and
// that the float32 kernel in use gives the same bits as the Go loop, on rows
// whose width is and is not a multiple of the vector width.
func TestGRUGateGrads(t *testing.T) {
	const tol = 1e-6 // float32 rounding of a handful of operations
	rng := rand.New(rand.NewPCG(51, 52))
	fill := func(n int, lo, hi float64) []float32 {
		s := make([]float32, n)
		for i := range s {
			s[i] = float32(lo + (hi-lo)*rng.Float64())
		}
		return s
	}
	for _, after := range []bool{true, false} {
		for _, H := range []int{1, 7, 16, 17, 33, 64, 255, 256, 257} {
			gates := fill(3*H, 0, 1)
			for j := 2 * H; j < 3*H; j++ { // n = tanh(·) lies in (−1, 1)
				gates[j] = 2*gates[j] - 1
			}
			dh, dNext0, hPrev, aux := fill(H, -1, 1), fill(H, -1, 1), fill(H, -1, 1), fill(H, -2, 2)
			dGates0 := fill(3*H, 5, 6) // the r block must stay as it was in the reset-before form
			run := func(kernel bool) (dGates, dRec, dNext []float32) {
				dGates = append([]float32(nil), dGates0...)
				if after {
					dRec = make([]float32, 3*H)
				}
				dNext = append([]float32(nil), dNext0...)
				if kernel {
					GRUGateGrads(dGates, dRec, gates, dh, dNext, hPrev, aux)
				} else {
					gruGateGradsGo(dGates, dRec, gates, dh, dNext, hPrev, aux, 0, H)
				}
				return
			}
			gotG, gotR, gotN := run(true)
			wantG, wantR, wantN := run(false)
			for _, c := range []struct {
				what      string
				got, want []float32
			}{{"dGates", gotG, wantG}, {"dRec", gotR, wantR}, {"dNext", gotN, wantN}} {
				for j := range c.want {
					if math.Float32bits(c.got[j]) != math.Float32bits(c.want[j]) {
						t.Fatalf("after=%v H=%d: %s[%d] got %x want %x (Go loop)", after, H, c.what, j, math.Float32bits(c.got[j]), math.Float32bits(c.want[j]))
					}
				}
			}
			for j := 0; j < H; j++ {
				r, z, n := float64(gates[j]), float64(gates[H+j]), float64(gates[2*H+j])
				gh := float64(dh[j]) + float64(dNext0[j])
				dn := gh * (1 - z) * (1 - n*n)
				dz := gh * (float64(hPrev[j]) - n) * z * (1 - z)
				if !after && gotG[j] != dGates0[j] {
					t.Errorf("reset-before H=%d: r block unit %d changed to %v", H, j, gotG[j])
				}
				want := map[string][2]float64{"dz": {float64(gotG[H+j]), dz}, "dn": {float64(gotG[2*H+j]), dn}, "dNext": {float64(gotN[j]), gh * z}}
				if after {
					dr := dn * float64(aux[j]) * r * (1 - r)
					want["dr"] = [2]float64{float64(gotG[j]), dr}
					want["dRec r"] = [2]float64{float64(gotR[j]), dr}
					want["dRec z"] = [2]float64{float64(gotR[H+j]), dz}
					want["dRec n"] = [2]float64{float64(gotR[2*H+j]), dn * r}
				}
				for what, gw := range want {
					if math.Abs(gw[0]-gw[1]) > tol*(1+math.Abs(gw[1])) {
						t.Errorf("after=%v H=%d unit %d: %s got %v want %v", after, H, j, what, gw[0], gw[1])
					}
				}
			}
		}
	}
}

// TestGRUGateGradsKernelUsed makes the bit-identity check above mean
// something where an assembly kernel exists.
func TestGRUGateGradsKernelUsed(t *testing.T) {
	if gruGrads32 == nil {
		t.Skip("no GRU kernel for this CPU or build: the Go loop runs")
	}
	H := 40
	s := make([]float32, 3*H)
	if n := gruGrads32(make([]float32, 3*H), make([]float32, 3*H), s, s[:H], make([]float32, H), s[:H], s[:H], H); n != 32 {
		t.Errorf("kernel handled %d of 40 units, want 32", n)
	}
}
