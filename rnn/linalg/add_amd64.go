package linalg

//go:noescape
func addAVX512(dst, x *float32, n int)

func init() {
	if hasAVX512 {
		add32 = add512
	}
}

func add512(dst, x []float32) int {
	n := len(x) &^ 15
	if n == 0 {
		return 0
	}
	_ = dst[n-1]
	addAVX512(&dst[0], &x[0], n)
	return n
}
