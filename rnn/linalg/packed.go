package linalg

import "fmt"

// PackedB is the second operand of a float32 product, packed once into the
// layout the micro-kernel reads, for a matrix that multiplies many
// different left operands: the recurrent weights, used at every one of T
// time steps. Packing B costs about a quarter of a 32×1024×256 product;
// GemmPacked skips it.
//
// The zero value is empty and ready for PackB. A PackedB belongs to the
// kernel chosen for this CPU and must be repacked when B changes (after
// every optimizer step). PackB must not run while a GemmPacked reads the
// same PackedB; any number of GemmPacked calls may share one.
type PackedB struct {
	kern *kernel[float32]
	k, n int
	npad int // n rounded up to whole panels
	data []float32
}

// K reports the number of rows of op(B) as packed.
func (pb *PackedB) K() int { return pb.k }

// N reports the number of columns of op(B) as packed.
func (pb *PackedB) N() int { return pb.n }

// PackB packs op(B), which is k×n (B is stored n×k when tB is set), with row
// stride ldb, into dst, reusing dst's memory when it is large enough.
//
// Layout: for each block of KC rows of op(B) in order, the columns in
// panels of NR, each panel stored k-major (NR values per row of op(B)),
// the last panel zero-padded.
func PackB(dst *PackedB, tB bool, k, n int, b []float32, ldb int) {
	if k < 0 || n < 0 {
		panic(fmt.Sprintf("linalg: negative dimension k=%d n=%d", k, n))
	}
	if tB {
		checkMatrix("B", n, k, len(b), ldb)
	} else {
		checkMatrix("B", k, n, len(b), ldb)
	}
	kern := kernel32()
	npad := (n + kern.nr - 1) / kern.nr * kern.nr
	size := npad * k
	if cap(dst.data) < size {
		dst.data = alignedSlice[float32](size)
	}
	*dst = PackedB{kern: kern, k: k, n: n, npad: npad, data: dst.data[:size]}
	for pc := 0; pc < k; pc += kern.kc {
		kc := min(kern.kc, k-pc)
		kern.packB(dst.data[pc*npad:pc*npad+kc*npad], tB, b, ldb, pc, kc, 0, n, kern.nr)
	}
}

// GemmPacked computes
//
//	C = alpha·op(A)·B + beta·C
//
// as Gemm does, with B packed by PackB: op(A) is m×pb.K(), C is m×pb.N().
// It gives the same bits as Gemm with the unpacked B, whatever the number
// of threads (in builds with the openblas tag Gemm calls OpenBLAS, while
// GemmPacked keeps this package's kernel).
func GemmPacked(p *Pool, tA bool, m int, alpha float32, a []float32, lda int, pb *PackedB, beta float32, c []float32, ldc int) {
	if pb.kern == nil {
		panic("linalg: GemmPacked with an empty PackedB")
	}
	if pb.kern != kernel32() {
		panic(fmt.Sprintf("linalg: PackedB packed for kernel %s, not %s", pb.kern.name, kernel32().name))
	}
	gemmPackedRun(p, pb, tA, m, alpha, a, lda, beta, c, ldc)
}

func gemmPackedRun(p *Pool, pb *PackedB, tA bool, m int, alpha float32, a []float32, lda int, beta float32, c []float32, ldc int) {
	n, k, kern := pb.n, pb.k, pb.kern
	if m < 0 {
		panic(fmt.Sprintf("linalg: negative dimension m=%d", m))
	}
	if tA {
		checkMatrix("A", k, m, len(a), lda)
	} else {
		checkMatrix("A", m, k, len(a), lda)
	}
	checkMatrix("C", m, n, len(c), ldc)
	if m == 0 || n == 0 {
		return
	}
	if k == 0 || alpha == 0 {
		scaleC(m, n, beta, c, ldc)
		return
	}
	j := kern.job()
	*j = gemmJob[float32]{kern: kern, tA: tA, m: m, n: n, k: k, alpha: alpha, a: a, lda: lda, beta: beta, c: c, ldc: ldc, packed: pb.data}
	j.plan(p.Threads())
	if j.parts > 1 {
		kern.reserve(j.parts)
	}
	p.run(j, j.parts)
	*j = gemmJob[float32]{}
	kern.jobs.put(j)
}

// blockPacked is block with op(B) already packed for all of k and n
// (columns padded to npad): only A is packed here. The tile grid and the k
// blocks are those of block, so the results are the same bits.
func (kern *kernel[T]) blockPacked(w *workspace[T], tA bool, i0, i1, j0, j1, n, k int, alpha T, a []T, lda int, packed []T, beta T, c []T, ldc int) {
	nr := kern.nr
	npad := (n + nr - 1) / nr * nr
	for pc := 0; pc < k; pc += kern.kc {
		kc := min(kern.kc, k-pc)
		bet := beta
		if pc > 0 {
			bet = 1
		}
		blockB := packed[pc*npad : pc*npad+kc*npad]
		for ic := i0; ic < i1; ic += kern.mc {
			mc := min(kern.mc, i1-ic)
			kern.packA(w.a, tA, a, lda, ic, mc, pc, kc, kern.mr)
			for jr := j0; jr < j1; jr += nr {
				nn := min(nr, j1-jr)
				kern.tiles(w, blockB[jr*kc:(jr+nr)*kc], kc, mc, nn, alpha, bet, c, ic*ldc+jr, ldc)
			}
		}
	}
}
