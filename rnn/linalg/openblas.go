//go:build openblas

package linalg

// With the openblas build tag, Gemm hands its products to OpenBLAS's
// cblas_sgemm and cblas_dgemm through cgo (package internal/cblas), as a
// yardstick for the kernels of this package and for users who have the
// library (Debian: apt-get install libopenblas-dev). OpenBLAS runs its own
// threads: each call sets their number to the Pool's thread count, and
// OpenBLAS does not promise bit-identical results across thread counts.

import "weft/rnn/linalg/internal/cblas"

func init() {
	blasGemm32 = openblasSgemm
	blasGemm64 = openblasDgemm
}

func kernelName() string { return "openblas" }

func openblasSgemm(p *Pool, tA, tB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	cblas.SetThreads(p.Threads())
	cblas.Sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

func openblasDgemm(p *Pool, tA, tB bool, m, n, k int, alpha float64, a []float64, lda int, b []float64, ldb int, beta float64, c []float64, ldc int) {
	cblas.SetThreads(p.Threads())
	cblas.Dgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}
