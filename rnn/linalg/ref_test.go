package linalg

// gemmNaive is the reference triple loop used by the tests. Each element of
// C is reduced over k in increasing order.
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
