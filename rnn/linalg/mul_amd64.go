package linalg

// Assembly in mul_amd64.s.

//go:noescape
func mulAVX512(dst, a, b *float32, n int)

//go:noescape
func mulAddMulAVX512(dst, a, b, c, d *float32, n int)

func init() {
	if hasAVX512 {
		mul32, mulAddMul32 = mul512, mulAddMul512
	}
}

func mul512(dst, a, b []float32) int {
	n := len(a) &^ 15
	if n == 0 {
		return 0
	}
	_, _ = dst[n-1], b[n-1]
	mulAVX512(&dst[0], &a[0], &b[0], n)
	return n
}

func mulAddMul512(dst, a, b, c, d []float32) int {
	n := len(a) &^ 15
	if n == 0 {
		return 0
	}
	_, _, _, _ = dst[n-1], b[n-1], c[n-1], d[n-1]
	mulAddMulAVX512(&dst[0], &a[0], &b[0], &c[0], &d[0], n)
	return n
}
