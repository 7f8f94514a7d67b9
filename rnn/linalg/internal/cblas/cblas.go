//go:build openblas

package cblas

/*
#cgo LDFLAGS: -lopenblas
#include <cblas.h>
*/
import "C"

import "sync/atomic"

var threads atomic.Int64

// SetThreads sets the number of OpenBLAS threads, calling into the library
// only when it changes.
func SetThreads(n int) {
	if threads.Swap(int64(n)) != int64(n) {
		C.openblas_set_num_threads(C.int(n))
	}
}

func trans(t bool) C.enum_CBLAS_TRANSPOSE {
	if t {
		return C.CblasTrans
	}
	return C.CblasNoTrans
}

// Sgemm is cblas_sgemm in row-major order. The caller checks the shapes and
// passes non-empty slices.
func Sgemm(tA, tB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	C.cblas_sgemm(C.CblasRowMajor, trans(tA), trans(tB), C.blasint(m), C.blasint(n), C.blasint(k),
		C.float(alpha), (*C.float)(&a[0]), C.blasint(lda), (*C.float)(&b[0]), C.blasint(ldb),
		C.float(beta), (*C.float)(&c[0]), C.blasint(ldc))
}

// Dgemm is cblas_dgemm in row-major order, as Sgemm.
func Dgemm(tA, tB bool, m, n, k int, alpha float64, a []float64, lda int, b []float64, ldb int, beta float64, c []float64, ldc int) {
	C.cblas_dgemm(C.CblasRowMajor, trans(tA), trans(tB), C.blasint(m), C.blasint(n), C.blasint(k),
		C.double(alpha), (*C.double)(&a[0]), C.blasint(lda), (*C.double)(&b[0]), C.blasint(ldb),
		C.double(beta), (*C.double)(&c[0]), C.blasint(ldc))
}
