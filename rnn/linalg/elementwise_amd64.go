package linalg

import "math"

// Assembly in elementwise_amd64.s.

//go:noescape
func expAVX512(dst, src *float32, n int)

//go:noescape
func sigmoidAVX512(dst, src *float32, n int)

//go:noescape
func tanhAVX512(dst, src *float32, n int)

//go:noescape
func maxAVX512(x *float32, n int) float32

//go:noescape
func scaleAVX512(x *float32, n int, s float32)

//go:noescape
func expShiftSumAVX512(dst, src *float32, n int, shift float32) float64

// archVecImpls returns the assembly elementwise kernels the CPU supports.
func archVecImpls() []*vecImpl {
	var impls []*vecImpl
	if hasAVX512 {
		impls = append(impls, vecAVX512)
	}
	if hasAVX2 {
		impls = append(impls, vecAVX2)
	}
	return impls
}

var vecAVX512 = &vecImpl{
	name: "avx512",
	exp: func(dst, x []float32) {
		if len(x) > 0 {
			_ = dst[len(x)-1]
			expAVX512(&dst[0], &x[0], len(x))
		}
	},
	sigmoid: func(dst, x []float32) {
		if len(x) > 0 {
			_ = dst[len(x)-1]
			sigmoidAVX512(&dst[0], &x[0], len(x))
		}
	},
	tanh: func(dst, x []float32) {
		if len(x) > 0 {
			_ = dst[len(x)-1]
			tanhAVX512(&dst[0], &x[0], len(x))
		}
	},
	expShiftSum: func(dst, x []float32, shift float32) float64 {
		if len(x) == 0 {
			return 0
		}
		_ = dst[len(x)-1]
		return expShiftSumAVX512(&dst[0], &x[0], len(x), shift)
	},
	max: func(x []float32) float32 {
		if len(x) == 0 {
			return float32(math.Inf(-1))
		}
		return maxAVX512(&x[0], len(x))
	},
	scale: func(x []float32, s float32) {
		if len(x) > 0 {
			scaleAVX512(&x[0], len(x), s)
		}
	},
}
