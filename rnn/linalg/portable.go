package linalg

// The portable kernel: pure Go, any platform, any element type. It is the
// float32 kernel where no assembly kernel fits the CPU and always the
// float64 one.

var (
	portable32 = newPortable[float32]()
	portable64 = newPortable[float64]()
)

func newPortable[T Float]() *kernel[T] {
	return &kernel[T]{
		name: "portable",
		mr:   4, nr: 4,
		mc: 128, kc: 256, nc: 1024,
		micro: micro4x4[T],
		packA: packAGo[T],
		packB: packBGo[T],
	}
}

// micro4x4 is the portable micro-kernel: a 4×4 tile in sixteen scalar
// accumulators, each reduced over k in increasing order.
func micro4x4[T Float](kc int, ap, bp, c []T, ldc int, alpha, beta T) {
	var c00, c01, c02, c03, c10, c11, c12, c13, c20, c21, c22, c23, c30, c31, c32, c33 T
	ap = ap[:4*kc]
	bp = bp[:4*kc]
	for l := 0; l+4 <= len(ap) && l+4 <= len(bp); l += 4 {
		a := (*[4]T)(ap[l:])
		b := (*[4]T)(bp[l:])
		a0, a1, a2, a3 := a[0], a[1], a[2], a[3]
		b0, b1, b2, b3 := b[0], b[1], b[2], b[3]
		c00 += a0 * b0
		c01 += a0 * b1
		c02 += a0 * b2
		c03 += a0 * b3
		c10 += a1 * b0
		c11 += a1 * b1
		c12 += a1 * b2
		c13 += a1 * b3
		c20 += a2 * b0
		c21 += a2 * b1
		c22 += a2 * b2
		c23 += a2 * b3
		c30 += a3 * b0
		c31 += a3 * b1
		c32 += a3 * b2
		c33 += a3 * b3
	}
	store4(c[0*ldc:0*ldc+4], alpha, beta, c00, c01, c02, c03)
	store4(c[1*ldc:1*ldc+4], alpha, beta, c10, c11, c12, c13)
	store4(c[2*ldc:2*ldc+4], alpha, beta, c20, c21, c22, c23)
	store4(c[3*ldc:3*ldc+4], alpha, beta, c30, c31, c32, c33)
}

func store4[T Float](c []T, alpha, beta, s0, s1, s2, s3 T) {
	c = c[:4]
	if beta == 0 {
		c[0], c[1], c[2], c[3] = alpha*s0, alpha*s1, alpha*s2, alpha*s3
		return
	}
	c[0] = alpha*s0 + beta*c[0]
	c[1] = alpha*s1 + beta*c[1]
	c[2] = alpha*s2 + beta*c[2]
	c[3] = alpha*s3 + beta*c[3]
}

// packAGo packs op(A) in pure Go; see kernel.packA.
func packAGo[T Float](dst []T, tA bool, a []T, lda, i0, rows, l0, kc, mr int) {
	for p := 0; p < rows; p += mr {
		r := min(mr, rows-p)
		panel := dst[p*kc : (p+mr)*kc]
		packPanelGo(panel, !tA, a, lda, i0+p, r, l0, kc, mr)
	}
}

// packBGo packs op(B) in pure Go; see kernel.packB.
func packBGo[T Float](dst []T, tB bool, b []T, ldb, l0, kc, j0, cols, nr int) {
	for q := 0; q < cols; q += nr {
		r := min(nr, cols-q)
		panel := dst[q*kc : (q+nr)*kc]
		packPanelGo(panel, tB, b, ldb, j0+q, r, l0, kc, nr)
	}
}

// packPanelGo writes panel[l*w+i] = X[i0+i][l0+l] for i < r and l < kc,
// and zero for r <= i < w, where X is the stored matrix x when across is
// set (its rows become panel columns) and xᵀ when it is not.
func packPanelGo[T Float](panel []T, across bool, x []T, ldx, i0, r, l0, kc, w int) {
	if across {
		for i := 0; i < r; i++ {
			row := x[(i0+i)*ldx+l0 : (i0+i)*ldx+l0+kc]
			for l, v := range row {
				panel[l*w+i] = v
			}
		}
	} else {
		for l := 0; l < kc; l++ {
			copy(panel[l*w:l*w+r], x[(l0+l)*ldx+i0:(l0+l)*ldx+i0+r])
		}
	}
	if r < w {
		for l := 0; l < kc; l++ {
			clear(panel[l*w+r : l*w+w])
		}
	}
}
