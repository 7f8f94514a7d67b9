package linalg

import "golang.org/x/sys/cpu"

// Assembly in kernel_amd64.s.

//go:noescape
func sgemm8x32(kc int, a, b, c *float32, ldc int, alpha, beta float32)

//go:noescape
func sgemm6x16(kc int, a, b, c *float32, ldc int, alpha, beta float32)

//go:noescape
func transpose8(dst *float32, dstStride int, src *float32, srcStride int, n int)

//go:noescape
func transpose6(dst *float32, src *float32, srcStride int, n int)

//go:noescape
func copyRows8(dst, src *float32, srcStride, rows int)

//go:noescape
func copyRows16(dst, src *float32, srcStride, rows int)

//go:noescape
func copyRows32(dst, src *float32, srcStride, rows int)

var (
	hasAVX2   = cpu.X86.HasAVX2 && cpu.X86.HasFMA
	hasAVX512 = hasAVX2 && cpu.X86.HasAVX512F

	avx512Kernel = &kernel[float32]{
		name: "avx512",
		mr:   8, nr: 32,
		mc: 192, kc: 256, nc: 2048,
		micro: micro8x32,
		packA: packA8,
		packB: packBAVX,
	}
	avx2Kernel = &kernel[float32]{
		name: "avx2",
		mr:   6, nr: 16,
		mc: 120, kc: 256, nc: 2048,
		micro: micro6x16,
		packA: packA6,
		packB: packBAVX,
	}
)

// archKernels32 returns the amd64 assembly kernels the CPU supports,
// fastest first.
func archKernels32() []*kernel[float32] {
	var ks []*kernel[float32]
	if hasAVX512 {
		ks = append(ks, avx512Kernel)
	}
	if hasAVX2 {
		ks = append(ks, avx2Kernel)
	}
	return ks
}

func micro8x32(kc int, ap, bp, c []float32, ldc int, alpha, beta float32) {
	_ = ap[8*kc-1]
	_ = bp[32*kc-1]
	_ = c[7*ldc+31]
	sgemm8x32(kc, &ap[0], &bp[0], &c[0], ldc, alpha, beta)
}

func micro6x16(kc int, ap, bp, c []float32, ldc int, alpha, beta float32) {
	_ = ap[6*kc-1]
	_ = bp[16*kc-1]
	_ = c[5*ldc+15]
	sgemm6x16(kc, &ap[0], &bp[0], &c[0], ldc, alpha, beta)
}

// packA8 packs op(A) into 8-row panels: an AVX transpose of 8×8 blocks when
// A is not transposed, a vector copy of 8 floats per k when it is.
func packA8(dst []float32, tA bool, a []float32, lda, i0, rows, l0, kc, mr int) {
	for p := 0; p < rows; p += 8 {
		panel := dst[p*kc : (p+8)*kc]
		if rows-p < 8 {
			packPanelGo(panel, !tA, a, lda, i0+p, rows-p, l0, kc, 8)
			continue
		}
		if tA {
			src := a[l0*lda+i0+p:]
			_ = src[(kc-1)*lda+7]
			copyRows8(&panel[0], &src[0], lda, kc)
			continue
		}
		k8 := kc &^ 7
		base := (i0+p)*lda + l0
		if k8 > 0 {
			src := a[base:]
			_ = src[7*lda+k8-1]
			transpose8(&panel[0], 8, &src[0], lda, k8/8)
		}
		for l := k8; l < kc; l++ {
			for i := 0; i < 8; i++ {
				panel[l*8+i] = a[base+i*lda+l]
			}
		}
	}
}

// packBAVX packs op(B) into nr-column panels (nr 16 or 32): a vector copy
// of each row when B is not transposed, AVX 8×8 transposes when it is.
func packBAVX(dst []float32, tB bool, b []float32, ldb, l0, kc, j0, cols, nr int) {
	for q := 0; q < cols; q += nr {
		panel := dst[q*kc : (q+nr)*kc]
		if cols-q < nr {
			packPanelGo(panel, tB, b, ldb, j0+q, cols-q, l0, kc, nr)
			continue
		}
		if !tB {
			src := b[l0*ldb+j0+q:]
			_ = src[(kc-1)*ldb+nr-1]
			if nr == 32 {
				copyRows32(&panel[0], &src[0], ldb, kc)
			} else {
				copyRows16(&panel[0], &src[0], ldb, kc)
			}
			continue
		}
		k8 := kc &^ 7
		base := (j0+q)*ldb + l0
		if k8 > 0 {
			_ = b[base+(nr-1)*ldb+k8-1]
			for g := 0; g < nr; g += 8 {
				transpose8(&panel[g], nr, &b[base+g*ldb], ldb, k8/8)
			}
		}
		for l := k8; l < kc; l++ {
			for j := 0; j < nr; j++ {
				panel[l*nr+j] = b[base+j*ldb+l]
			}
		}
	}
}

// packA6 packs op(A) into 6-row panels for the AVX2 kernel: an AVX
// transpose of 6×8 blocks when A is not transposed, Go copies when it is.
// transpose6 stores 2 floats past each block; the panel that follows, the
// Go tail or the slack of alignedSlice takes them.
func packA6(dst []float32, tA bool, a []float32, lda, i0, rows, l0, kc, mr int) {
	if tA {
		packAGo(dst, tA, a, lda, i0, rows, l0, kc, mr)
		return
	}
	_ = dst[:cap(dst)][rows*kc+2-1] // room for the overrun (rows rounded up to 6 panels)
	for p := 0; p < rows; p += 6 {
		panel := dst[p*kc : (p+6)*kc]
		if rows-p < 6 {
			packPanelGo(panel, true, a, lda, i0+p, rows-p, l0, kc, 6)
			continue
		}
		k8 := kc &^ 7
		base := (i0+p)*lda + l0
		if k8 > 0 {
			src := a[base:]
			_ = src[5*lda+k8-1]
			transpose6(&panel[0], &src[0], lda, k8/8)
		}
		for l := k8; l < kc; l++ {
			for i := 0; i < 6; i++ {
				panel[l*6+i] = a[base+i*lda+l]
			}
		}
	}
}
