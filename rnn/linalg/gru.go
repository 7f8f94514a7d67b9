package linalg

// GRUGateGrads computes the part of the backward step of a GRU cell (Cho
// et al. 2014) that needs no matrix product, for one row of H = len(dh)
// units. gates holds the activations r, z, n (3H, blocks in that order),
// hPrev = h_{t−1}, dh = ∂L/∂h_t from above; dNext holds ∂L/∂h_t from step
// t+1 on entry and the part of ∂L/∂h_{t−1} that flows through z on
// return. It writes the z and n blocks of the pre-activation gradients
// dGates:
//
//	δh = dh + dNext
//	δn = δh·(1 − z)·(1 − n²)
//	δz = δh·(h_{t−1} − n)·z·(1 − z)
//	dNext ← δh·z
//
// For the reset-after form (dRec not nil), with u = U_n h_{t−1} + b_hn in
// aux, it also writes the r block and the gradient of the recurrent
// pre-activations to dRec (3H):
//
//	δr = δn·u·r·(1 − r)
//	dRec = (δr, δz, δn·r)
//
// each product evaluated left to right, each operation rounded to T (no
// fused multiply-add). The float32 AVX-512 kernel (amd64 builds below
// GOAMD64=v3, where the compiler fuses nothing either) gives the same bits
// as the Go loop.
func GRUGateGrads[T Float](dGates, dRec, gates, dh, dNext, hPrev, aux []T) {
	H := len(dh)
	if len(gates) < 3*H || len(dGates) < 3*H || len(dNext) < H || len(hPrev) < H || (dRec != nil && (len(dRec) < 3*H || len(aux) < H)) {
		panic("linalg: GRUGateGrads slices shorter than the row")
	}
	j0 := 0
	if isF32[T]() && gruGrads32 != nil && H >= 16 {
		j0 = gruGrads32(as32(dGates), as32(dRec), as32(gates), as32(dh), as32(dNext), as32(hPrev), as32(aux), H)
	}
	gruGateGradsGo(dGates, dRec, gates, dh, dNext, hPrev, aux, j0, H)
}

// gruGrads32 is the assembly kernel where the CPU has one: it handles the
// first units of the row (a multiple of its vector width) and returns how
// many.
var gruGrads32 func(dGates, dRec, gates, dh, dNext, hPrev, aux []float32, H int) int

// gruGateGradsGo is GRUGateGrads for units [j0, H).
func gruGateGradsGo[T Float](dGates, dRec, gates, dh, dNext, hPrev, aux []T, j0, H int) {
	r, z, nn := gates[:H], gates[H:2*H], gates[2*H:3*H]
	dr, dz, dn := dGates[:H], dGates[H:2*H], dGates[2*H:3*H]
	dh, dNext, hPrev = dh[:H], dNext[:H], hPrev[:H]
	after := dRec != nil
	for j := j0; j < H; j++ {
		gh := dh[j] + dNext[j]
		dnp := gh * (1 - z[j]) * (1 - nn[j]*nn[j])
		dz[j] = gh * (hPrev[j] - nn[j]) * z[j] * (1 - z[j])
		dn[j] = dnp
		dNext[j] = gh * z[j]
		if after {
			drj := dnp * aux[j] * r[j] * (1 - r[j])
			dr[j] = drj
			dRec[j], dRec[H+j], dRec[2*H+j] = drj, dz[j], dnp*r[j]
		}
	}
}
