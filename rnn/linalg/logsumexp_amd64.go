package linalg

// Assembly in logsumexp_amd64.s.

//go:noescape
func expShift64AVX512(dst *float64, src *float32, n int, shift float64) int

// haveExpShift64: the CPU runs the kernel.
var haveExpShift64 = hasAVX512

func init() {
	useExpShift64 = haveExpShift64 && expShiftAgrees(expShift64)
}

// expShift64 runs the kernel over the whole groups of eight of x (see
// useExpShift64); call it only where the CPU has AVX-512.
func expShift64(dst []float64, x []float32, shift float64) int {
	n := len(x) &^ 7
	if n == 0 {
		return 0
	}
	_ = dst[n-1]
	return expShift64AVX512(&dst[0], &x[0], n, shift)
}
