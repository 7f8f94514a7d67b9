//go:build !amd64.v3

package linalg

// With GOAMD64=v3 or above the compiler fuses multiply-adds in the Go loop,
// so the unfused assembly would round differently: it is used only below.

//go:noescape
func lstmGradsAVX512(dGates, gates, dh, dNext, dc, tc, cPrev *float32, H, n int)

func init() {
	if hasAVX512 {
		lstmGrads32 = lstmGrads512
	}
}

func lstmGrads512(dGates, gates, dh, dNext, dc, tc, cPrev []float32, H int) int {
	n := H &^ 15
	if n == 0 {
		return 0
	}
	_, _ = dGates[4*H-1], gates[4*H-1]
	_, _, _, _, _ = dh[H-1], dNext[H-1], dc[H-1], tc[H-1], cPrev[H-1]
	lstmGradsAVX512(&dGates[0], &gates[0], &dh[0], &dNext[0], &dc[0], &tc[0], &cPrev[0], H, n)
	return n
}
