package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// lstmRow is one row of LSTMGateGrads operands.
type lstmRow struct {
	gates, dh, dNext, dc, tc, cPrev []float32
}

func newLSTMRow(rng *rand.Rand, H int) lstmRow {
	fill := func(n int, lo, hi float64) []float32 {
		s := make([]float32, n)
		for i := range s {
			s[i] = float32(lo + (hi-lo)*rng.Float64())
		}
		return s
	}
	r := lstmRow{gates: fill(4*H, 0, 1), dh: fill(H, -1, 1), dNext: fill(H, -1, 1), dc: fill(H, -2, 2), cPrev: fill(H, -3, 3)}
	for j := 2 * H; j < 3*H; j++ { // g = tanh(·) lies in (−1, 1)
		r.gates[j] = 2*r.gates[j] - 1
	}
	r.tc = fill(H, -1, 1)
	return r
}

// TestLSTMGateGrads checks LSTMGateGrads against the backward step of an
// LSTM cell written out in float64 (the equations of its doc comment, the
// derivative of the forward equations of Gers et al. 2000), and that the
// float32 kernel in use gives the same bits as the Go loop, on rows whose
// width is and is not a multiple of the vector width.
func TestLSTMGateGrads(t *testing.T) {
	const tol = 1e-6 // float32 rounding of a handful of operations
	rng := rand.New(rand.NewPCG(31, 32))
	for _, H := range []int{1, 7, 15, 16, 17, 33, 64, 255, 256, 257} {
		r := newLSTMRow(rng, H)
		dGates := make([]float32, 4*H)
		dc := append([]float32(nil), r.dc...)
		LSTMGateGrads(dGates, r.gates, r.dh, r.dNext, dc, r.tc, r.cPrev)

		wantG := make([]float32, 4*H)
		wantC := append([]float32(nil), r.dc...)
		lstmGateGradsGo(wantG, r.gates, r.dh, r.dNext, wantC, r.tc, r.cPrev, 0, H)
		for j := range wantG {
			if math.Float32bits(dGates[j]) != math.Float32bits(wantG[j]) {
				t.Fatalf("H=%d: dGates[%d] got %x want %x (Go loop)", H, j, math.Float32bits(dGates[j]), math.Float32bits(wantG[j]))
			}
		}
		for j := range wantC {
			if math.Float32bits(dc[j]) != math.Float32bits(wantC[j]) {
				t.Fatalf("H=%d: dc[%d] got %x want %x (Go loop)", H, j, math.Float32bits(dc[j]), math.Float32bits(wantC[j]))
			}
		}
		for j := 0; j < H; j++ {
			i, f, g, o := float64(r.gates[j]), float64(r.gates[H+j]), float64(r.gates[2*H+j]), float64(r.gates[3*H+j])
			tc, cp := float64(r.tc[j]), float64(r.cPrev[j])
			gh := float64(r.dh[j]) + float64(r.dNext[j])
			dct := float64(r.dc[j]) + gh*o*(1-tc*tc)
			want := []float64{dct * g * i * (1 - i), dct * cp * f * (1 - f), dct * i * (1 - g*g), gh * tc * o * (1 - o)}
			for b, w := range want {
				if got := float64(dGates[b*H+j]); math.Abs(got-w) > tol*(1+math.Abs(w)) {
					t.Errorf("H=%d: gate block %d unit %d got %v want %v", H, b, j, got, w)
				}
			}
			if got, w := float64(dc[j]), dct*f; math.Abs(got-w) > tol*(1+math.Abs(w)) {
				t.Errorf("H=%d: dc[%d] got %v want %v", H, j, got, w)
			}
		}
	}
}

// TestLSTMGateGradsKernelUsed makes the bit-identity check above mean
// something: on amd64 with AVX-512 (below GOAMD64=v3) the assembly kernel
// handles the whole multiples of 16.
func TestLSTMGateGradsKernelUsed(t *testing.T) {
	if lstmGrads32 == nil {
		t.Skip("no LSTM kernel for this CPU or build: the Go loop runs")
	}
	rng := rand.New(rand.NewPCG(33, 34))
	r := newLSTMRow(rng, 40)
	if n := lstmGrads32(make([]float32, 160), r.gates, r.dh, r.dNext, r.dc, r.tc, r.cPrev, 40); n != 32 {
		t.Errorf("kernel handled %d of 40 units, want 32", n)
	}
}

func BenchmarkLSTMGateGrads(b *testing.B) {
	const H = 256
	r := newLSTMRow(rand.New(rand.NewPCG(35, 36)), H)
	dGates := make([]float32, 4*H)
	for _, impl := range []string{"kernel", "go"} {
		b.Run("impl="+impl+"/H=256", func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				if impl == "go" {
					lstmGateGradsGo(dGates, r.gates, r.dh, r.dNext, r.dc, r.tc, r.cPrev, 0, H)
				} else {
					LSTMGateGrads(dGates, r.gates, r.dh, r.dNext, r.dc, r.tc, r.cPrev)
				}
			}
			benchSinkLSTM += dGates[0]
		})
	}
}

var benchSinkLSTM float32
