//go:build openblas

package linalg

import (
	"math/rand/v2"
	"testing"
)

// extraBenchKernels adds OpenBLAS to the benchmarks, so that the ratios of
// our kernels to it come from one run.
func extraBenchKernels() []benchKernel {
	return []benchKernel{{"openblas", func(p *Pool, tA, tB bool, m, n, k int, a []float32, lda int, b []float32, ldb int, c []float32, ldc int) {
		openblasSgemm(p, tA, tB, m, n, k, 1, a, lda, b, ldb, 0, c, ldc)
	}}}
}

// TestOpenBLAS checks the cgo route through Gemm against the naive product
// for both element types, so the tag's wiring (transposes, row-major
// strides) is tested, not only linked.
func TestOpenBLAS(t *testing.T) {
	if KernelName() != "openblas" {
		t.Fatalf("KernelName: got %q want openblas", KernelName())
	}
	rng := rand.New(rand.NewPCG(11, 12))
	for _, tc := range gemmCases(13, 4) {
		o32 := newOperands[float32](tc, rng)
		got32 := append([]float32(nil), o32.c...)
		Gemm(nil, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o32.a, o32.lda, o32.b, o32.ldb, float32(tc.beta), got32, o32.ldc)
		o64 := newOperands[float64](tc, rng)
		got64 := append([]float64(nil), o64.c...)
		Gemm(nil, tc.tA, tc.tB, tc.m, tc.n, tc.k, tc.alpha, o64.a, o64.lda, o64.b, o64.ldb, tc.beta, got64, o64.ldc)
		t.Run(tc.String(), func(t *testing.T) {
			checkGemmResult(t, tc, o32, got32, eps32)
			checkGemmResult(t, tc, o64, got64, eps64)
		})
	}
}
