package linalg

// LSTMGateGrads computes the backward step of an LSTM cell (Gers,
// Schmidhuber & Cummins 2000, no peepholes) for one row of H = len(dh)
// units. gates holds the activations i, f, g, o (4H, blocks in that order),
// tc = tanh(c_t), cPrev = c_{t−1}, dh = ∂L/∂h_t from above and dNext =
// ∂L/∂h_t from step t+1; dc holds ∂L/∂c_t from step t+1 on entry and
// ∂L/∂c_{t−1} on return. It writes the pre-activation gradients to dGates
// (4H, same blocks):
//
//	δh = dh + dNext
//	δc = dc + δh·o·(1 − tc²)
//	δo = δh·tc·o·(1 − o)
//	δi = δc·g·i·(1 − i)
//	δg = δc·i·(1 − g²)
//	δf = δc·c_{t−1}·f·(1 − f)
//	dc ← δc·f
//
// each product evaluated left to right, each operation rounded to T (no
// fused multiply-add). The float32 AVX-512 kernel (amd64 builds below
// GOAMD64=v3, where the compiler fuses nothing either) gives the same bits
// as the Go loop.
func LSTMGateGrads[T Float](dGates, gates, dh, dNext, dc, tc, cPrev []T) {
	H := len(dh)
	if len(gates) < 4*H || len(dGates) < 4*H || len(dNext) < H || len(dc) < H || len(tc) < H || len(cPrev) < H {
		panic("linalg: LSTMGateGrads slices shorter than the row")
	}
	j0 := 0
	if isF32[T]() && lstmGrads32 != nil && H >= 16 {
		j0 = lstmGrads32(as32(dGates), as32(gates), as32(dh), as32(dNext), as32(dc), as32(tc), as32(cPrev), H)
	}
	lstmGateGradsGo(dGates, gates, dh, dNext, dc, tc, cPrev, j0, H)
}

// lstmGrads32 is the assembly kernel where the CPU has one: it handles the
// first units of the row (a multiple of its vector width) and returns how
// many.
var lstmGrads32 func(dGates, gates, dh, dNext, dc, tc, cPrev []float32, H int) int

// lstmGateGradsGo is LSTMGateGrads for units [j0, H).
func lstmGateGradsGo[T Float](dGates, gates, dh, dNext, dc, tc, cPrev []T, j0, H int) {
	i, f, g, o := gates[:H], gates[H:2*H], gates[2*H:3*H], gates[3*H:4*H]
	di, df, dg, do := dGates[:H], dGates[H:2*H], dGates[2*H:3*H], dGates[3*H:4*H]
	dh, dNext, dc, tc, cPrev = dh[:H], dNext[:H], dc[:H], tc[:H], cPrev[:H]
	for j := j0; j < H; j++ {
		gh := dh[j] + dNext[j]
		dct := dc[j] + gh*o[j]*(1-tc[j]*tc[j])
		do[j] = gh * tc[j] * o[j] * (1 - o[j])
		di[j] = dct * g[j] * i[j] * (1 - i[j])
		dg[j] = dct * i[j] * (1 - g[j]*g[j])
		df[j] = dct * cPrev[j] * f[j] * (1 - f[j])
		dc[j] = dct * f[j]
	}
}
