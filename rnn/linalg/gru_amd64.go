//go:build !amd64.v3

package linalg

//go:noescape
func gruGradsAVX512(dGates, dRec, gates, dh, dNext, hPrev, aux *float32, H, n int)

func init() {
	if hasAVX512 {
		gruGrads32 = gruGrads512
	}
}

func gruGrads512(dGates, dRec, gates, dh, dNext, hPrev, aux []float32, H int) int {
	n := H &^ 15
	if n == 0 {
		return 0
	}
	_, _ = dGates[3*H-1], gates[3*H-1]
	_, _, _ = dh[H-1], dNext[H-1], hPrev[H-1]
	var rec, u *float32 // nil: the reset-before form
	if dRec != nil {
		_, _ = dRec[3*H-1], aux[H-1]
		rec, u = &dRec[0], &aux[0]
	}
	gruGradsAVX512(&dGates[0], rec, &gates[0], &dh[0], &dNext[0], &hPrev[0], u, H, n)
	return n
}
