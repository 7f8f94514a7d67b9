// Package linalg holds the dense kernels behind weft's recurrent engine:
// matrix products and elementwise activation functions over flat, row-major
// slices of float32 or float64.
//
// The engine in package rnn calls only the functions of this package, so a
// faster kernel can replace a slower one without touching the cells.
//
// # Matrix product
//
// [Gemm] follows Goto and van de Geijn (2008), "Anatomy of high-performance
// matrix multiplication", ACM TOMS 34(3). The k dimension is cut into blocks
// of KC, the columns of C into blocks of NC and the rows into blocks of MC.
// For each (NC, KC) block, op(B) is packed into NR-wide column panels and,
// inside it, each MC×KC block of op(A) into MR-high row panels, both
// zero-padded to whole panels. A register-blocked micro-kernel then
// multiplies one MR×KC panel of A by one KC×NR panel of B into an MR×NR tile
// of C. Transposition is absorbed by the packing routines, so the four
// combinations of tA and tB run the same micro-kernel at the same speed.
//
// The float32 micro-kernel is chosen once at start-up from the CPU's
// features (golang.org/x/sys/cpu):
//
//	kernel    tile (MR×NR)  registers           MC   KC   NC    needs
//	avx512    8×32          16 ZMM accumulators 192  256  2048  AVX-512F (amd64)
//	avx2      6×16          12 YMM accumulators 120  256  2048  AVX2 and FMA (amd64)
//	portable  4×4           16 scalar           128  256  1024  any platform, pure Go
//
// The amd64 kernels are Go assembly; packing uses an assembly 8×8 AVX
// transpose where a panel is transposed and vector copies where it is not.
// When all rows of C fit one MC block (the recurrent step, m = batch size),
// each B panel is packed just before its tiles use it, so it is read back
// from L1. float64, used only by the gradient tests, always takes the
// portable path. [KernelName] reports the choice.
//
// [PackB] and [GemmPacked] pack the second operand once for many products
// (the recurrent weights across the T steps of a window); GemmPacked gives
// the same bits as Gemm.
//
// # Threads and determinism
//
// A [Pool] is a fixed set of worker goroutines. A product is split into as
// many parts as pay for themselves, one per 2^19 multiply-adds
// ([ProductParts]; none below 2^20), at most one per thread and one per
// tile along the split dimension, over whole tiles of C (rows when op(A) is
// the larger operand, else columns), never over k. Each part packs into a
// workspace of its own, taken from a cache that grows to the largest number
// of parts ever running at once, so a steady-state product allocates
// nothing on any number of threads. Workers spin briefly between parts,
// then park. Every function returns
// the same bits for the same inputs whatever the number of threads: split
// points are multiples of MR or NR, so each element of C is computed by the
// same tile code, reduced over k in the same KC blocks in increasing order.
// Results may differ between kernels (between machines) in the last bits,
// as fused multiply-adds round once where the portable kernel rounds twice.
//
// [Pool.For] splits an elementwise loop the same way: into ranges of whole
// chunks of indices, one run of chunks per thread. A loop body that computes
// each index from that index alone (no reduction across the range) gives
// the same bits on any number of threads.
//
// # Elementwise kernels
//
// For float32, [Exp], [Sigmoid], [Tanh] and [SoftmaxCrossEntropy] use a
// Cody–Waite range reduction and Cephes minimax polynomials (exp32.go), in
// AVX-512 or AVX2+FMA assembly where the CPU has it and in pure Go
// otherwise (measured here: about 0.15-0.36, 0.37-0.63 and 4.6-7.3 ns per
// element, against 25-30 for a float64 math loop). Measured
// against package math in float64 over a sweep of float32 inputs:
//
//	exp      relative error ≤ 1.2e-7 (about 1 ulp) where e^x is normal;
//	         +Inf above 88.72, 0 below −103.97, NaN stays NaN
//	sigmoid  absolute error ≤ 1e-7, relative ≤ 2e-7 where the result is
//	         normal; σ(x) ≤ 2^−126 may flush to 0
//	tanh     absolute error ≤ 1e-7, relative ≤ 2e-7; tanh(±0) = ±0
//
// SoftmaxCrossEntropy sums each row's exponentials and the loss in float64.
// float64 instances call package math.
//
// # OpenBLAS yardstick
//
// Built with the openblas tag (cgo, libopenblas-dev), Gemm calls OpenBLAS's
// cblas_sgemm and cblas_dgemm instead, with as many OpenBLAS threads as the
// Pool has; the determinism guarantee then rests on OpenBLAS. The default
// build is pure Go. Tests and side-by-side benchmarks:
//
//	go test -tags openblas ./rnn/linalg/
//	env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE \
//	    go test -tags openblas -run '^$' -bench Sgemm -benchtime 20x -count 3 ./rnn/linalg/
package linalg

import "unsafe"

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
// strides of A, B and C as stored (A is stored k×m when tA is set, B is
// stored n×k when tB is set). When beta is zero, C is not read (NaNs in it do
// not propagate); when alpha is zero or k is zero, A and B are not read. A
// nil pool runs on the calling goroutine; products too small to gain from
// threads also run there. C must not overlap A or B. Shapes that do not fit
// the slices panic. The result does not depend on the pool's thread count.
func Gemm[T Float](p *Pool, tA, tB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	if unsafe.Sizeof(alpha) == 4 {
		if blasGemm32 != nil {
			blasRun(p, blasGemm32, tA, tB, m, n, k, float32(alpha), as32(a), lda, as32(b), ldb, float32(beta), as32(c), ldc)
			return
		}
		gemmRun(p, kernel32(), tA, tB, m, n, k, float32(alpha), as32(a), lda, as32(b), ldb, float32(beta), as32(c), ldc)
		return
	}
	if blasGemm64 != nil {
		blasRun(p, blasGemm64, tA, tB, m, n, k, float64(alpha), as64(a), lda, as64(b), ldb, float64(beta), as64(c), ldc)
		return
	}
	gemmRun(p, portable64, tA, tB, m, n, k, float64(alpha), as64(a), lda, as64(b), ldb, float64(beta), as64(c), ldc)
}

// blasGemm32 and blasGemm64 are set in builds with the openblas tag.
var (
	blasGemm32 func(p *Pool, tA, tB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int)
	blasGemm64 func(p *Pool, tA, tB bool, m, n, k int, alpha float64, a []float64, lda int, b []float64, ldb int, beta float64, c []float64, ldc int)
)

// blasRun checks the shapes and the degenerate cases as gemmRun does, then
// calls an external BLAS.
func blasRun[T Float](p *Pool, f func(*Pool, bool, bool, int, int, int, T, []T, int, []T, int, T, []T, int), tA, tB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	checkGemm(tA, tB, m, n, k, len(a), lda, len(b), ldb, len(c), ldc)
	if m == 0 || n == 0 {
		return
	}
	if k == 0 || alpha == 0 {
		scaleC(m, n, beta, c, ldc)
		return
	}
	f(p, tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

// as32 views a slice of a type whose underlying type is float32 as
// []float32. It is called only when the element size is 4, which for Float
// means the underlying type is float32.
func as32[T Float](s []T) []float32 {
	return unsafe.Slice((*float32)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}

// as64 is as32 for float64.
func as64[T Float](s []T) []float64 {
	return unsafe.Slice((*float64)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}
