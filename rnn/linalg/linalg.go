// Package linalg holds the dense kernels behind weft's recurrent engine:
// matrix products and elementwise activation functions over flat, row-major
// slices of float32 or float64.
//
// The engine in package rnn calls only the functions of this package, so a
// faster kernel can replace a slower one without touching the cells. Every
// function is deterministic: for the same inputs it returns the same bits
// whatever the number of threads in the Pool, because work is split over
// output elements and never over a reduction.
package linalg

// Float is the element type of every kernel: float32 for training, float64
// for the gradient tests.
type Float interface {
	~float32 | ~float64
}

// Gemm computes
//
//	C = alpha·op(A)·op(B) + beta·C
//
// for row-major matrices, where op(X) is X or its transpose Xᵀ as tA and tB
// say. op(A) is m×k, op(B) is k×n and C is m×n; lda, ldb and ldc are the row
// strides of A, B and C as stored. When beta is zero, C is not read (NaNs in
// it do not propagate). A nil pool runs on the calling goroutine.
func Gemm[T Float](p *Pool, tA, tB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	gemmNaive(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

// gemmNaive is the reference triple loop. Each element of C is reduced over
// k in increasing order.
func gemmNaive[T Float](tA, tB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	for i := 0; i < m; i++ {
		for j := 0; j < n; j++ {
			var s T
			for l := 0; l < k; l++ {
				var av, bv T
				if tA {
					av = a[l*lda+i]
				} else {
					av = a[i*lda+l]
				}
				if tB {
					bv = b[j*ldb+l]
				} else {
					bv = b[l*ldb+j]
				}
				s += av * bv
			}
			if beta == 0 {
				c[i*ldc+j] = alpha * s
			} else {
				c[i*ldc+j] = alpha*s + beta*c[i*ldc+j]
			}
		}
	}
}
