package linalg

import (
	"fmt"
	"sync"
	"unsafe"
)

// kernel is one micro-kernel with the block sizes and packing routines
// around it. Kernels are package-level values, never copied.
type kernel[T Float] struct {
	name       string
	mr, nr     int // register tile of C
	mc, kc, nc int // cache blocks; mc is a multiple of mr, nc of nr

	// micro sets the mr×nr tile c (row stride ldc) to alpha·Ap·Bp + beta·c,
	// where ap holds kc rows of mr and bp kc rows of nr packed values. When
	// beta is zero, c is not read.
	micro func(kc int, ap, bp, c []T, ldc int, alpha, beta T)

	// packA packs rows [i0, i0+rows) and columns [l0, l0+kc) of op(A) into
	// dst as panels of mr rows, each stored k-major and zero-padded to mr.
	packA func(dst []T, tA bool, a []T, lda, i0, rows, l0, kc, mr int)

	// packB packs rows [l0, l0+kc) and columns [j0, j0+cols) of op(B) into
	// dst as panels of nr columns, each stored k-major and zero-padded to nr.
	packB func(dst []T, tB bool, b []T, ldb, l0, kc, j0, cols, nr int)

	spaces cache[workspace[T]]
	jobs   cache[gemmJob[T]]
}

// cache keeps reusable objects on a free list that grows to the largest
// number ever in use at once: one workspace per packer running at the same
// time, whatever the number of threads and pools. Unlike a sync.Pool it is
// not emptied by the garbage collector, so a collection does not make the
// next products reallocate their megabytes of packing buffers; unlike a
// fixed set of slots it never drops an object, so a product split over
// more threads than slots does not allocate afresh at every call.
type cache[E any] struct {
	mu   sync.Mutex
	free []*E
	made int // objects made for this cache (see kernel.reserve)
}

// get returns a cached object or nil.
func (c *cache[E]) get() *E {
	c.mu.Lock()
	defer c.mu.Unlock()
	n := len(c.free)
	if n == 0 {
		return nil
	}
	e := c.free[n-1]
	c.free[n-1] = nil
	c.free = c.free[:n-1]
	return e
}

// put caches e. The free list grows (allocating) only when more objects
// are in use at once than ever before.
func (c *cache[E]) put(e *E) {
	c.mu.Lock()
	c.free = append(c.free, e)
	c.mu.Unlock()
}

// workspace holds one thread's packing buffers, aligned to 64 bytes.
type workspace[T Float] struct {
	a, b, tile []T
}

func (kern *kernel[T]) workspace() *workspace[T] {
	if w := kern.spaces.get(); w != nil {
		return w
	}
	kern.spaces.mu.Lock()
	kern.spaces.made++
	kern.spaces.mu.Unlock()
	return kern.newWorkspace()
}

// reserve makes sure that at least n workspaces exist, so that a product
// of n parts finds one for each part in the cache even when all of them
// run at once (on a machine with fewer cores than threads that happens
// only by chance, and would make a later product allocate).
func (kern *kernel[T]) reserve(n int) {
	c := &kern.spaces
	c.mu.Lock()
	defer c.mu.Unlock()
	for c.made < n {
		c.free = append(c.free, kern.newWorkspace())
		c.made++
	}
}

func (kern *kernel[T]) newWorkspace() *workspace[T] {
	return &workspace[T]{
		a:    alignedSlice[T](kern.mc * kern.kc),
		b:    alignedSlice[T](kern.kc * kern.nc),
		tile: alignedSlice[T](kern.mr * kern.nr),
	}
}

// alignedSlice returns a zeroed slice of n elements whose first element is
// 64-byte aligned, with room for 16 more elements past its end (the AVX2
// packing stores whole vectors).
func alignedSlice[T Float](n int) []T {
	var z T
	per := 64 / int(unsafe.Sizeof(z))
	s := make([]T, n+2*per)
	off := 0
	for uintptr(unsafe.Pointer(&s[off]))%64 != 0 {
		off++
	}
	return s[off : off+n : off+n+per]
}

// minPartWork is the least work, in multiply-adds (m·n·k), worth handing
// to one thread: waking a spinning worker, and the packing it repeats (each
// part packs all of the operand it shares), cost a few microseconds, about
// what 2^18 multiply-adds take on one core, so a part of 2^19 keeps that
// overhead near a third or less. A product is split into at most
// m·n·k / minPartWork parts, never more than the pool's threads nor the
// tiles along the split dimension: a 32×1024×256 recurrent step (2^23) into
// at most 16, a 32×96×64 one not at all.
const minPartWork = 1 << 19

// parallelMinWork is the least work a product needs to be split at all:
// two parts' worth.
const parallelMinWork = 2 * minPartWork

// checkGemm panics when the shapes do not fit the slices.
func checkGemm(tA, tB bool, m, n, k, la, lda, lb, ldb, lc, ldc int) {
	if m < 0 || n < 0 || k < 0 {
		panic(fmt.Sprintf("linalg: negative dimension m=%d n=%d k=%d", m, n, k))
	}
	if tA {
		checkMatrix("A", k, m, la, lda)
	} else {
		checkMatrix("A", m, k, la, lda)
	}
	if tB {
		checkMatrix("B", n, k, lb, ldb)
	} else {
		checkMatrix("B", k, n, lb, ldb)
	}
	checkMatrix("C", m, n, lc, ldc)
}

// checkMatrix panics unless a slice of length l holds a rows×cols matrix
// with row stride ld.
func checkMatrix(name string, rows, cols, l, ld int) {
	if cols > 0 && ld < cols {
		panic(fmt.Sprintf("linalg: %s stride %d less than its %d columns", name, ld, cols))
	}
	if rows > 0 && cols > 0 && l < (rows-1)*ld+cols {
		panic(fmt.Sprintf("linalg: %s has %d elements, needs %d for %d×%d with stride %d", name, l, (rows-1)*ld+cols, rows, cols, ld))
	}
}

// gemmRun checks the arguments, handles the degenerate cases, and splits C
// over the pool's threads in whole tiles.
func gemmRun[T Float](p *Pool, kern *kernel[T], tA, tB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	checkGemm(tA, tB, m, n, k, len(a), lda, len(b), ldb, len(c), ldc)
	if m == 0 || n == 0 {
		return
	}
	if k == 0 || alpha == 0 {
		scaleC(m, n, beta, c, ldc)
		return
	}
	j := kern.job()
	*j = gemmJob[T]{kern: kern, tA: tA, tB: tB, m: m, n: n, k: k, alpha: alpha, a: a, lda: lda, b: b, ldb: ldb, beta: beta, c: c, ldc: ldc, parts: 1}
	j.plan(p.Threads())
	if j.parts > 1 {
		kern.reserve(j.parts)
	}
	p.run(j, j.parts)
	*j = gemmJob[T]{}
	kern.jobs.put(j)
}

// plan splits the job into parts, one per thread, in whole tiles: as many
// as pay for themselves (work / minPartWork), at most threads, and at most
// the number of tiles along the split dimension.
func (j *gemmJob[T]) plan(threads int) {
	j.parts = 1
	mt := (j.m + j.kern.mr - 1) / j.kern.mr
	nt := (j.n + j.kern.nr - 1) / j.kern.nr
	want := planParts(threads, j.m, j.n, j.k)
	if want < 2 {
		return
	}
	// Each thread packs the whole of the operand it shares, so split the
	// other one: rows of C when op(A) is the larger, else columns. When
	// neither dimension has a tile per part, split the one with more.
	switch {
	case j.m > j.n && mt >= want:
		j.parts, j.splitRows, j.tiles = want, true, mt
	case nt >= want:
		j.parts, j.tiles = want, nt
	case mt >= want:
		j.parts, j.splitRows, j.tiles = want, true, mt
	case mt > nt:
		j.parts, j.splitRows, j.tiles = mt, true, mt
	case nt > 1:
		j.parts, j.tiles = nt, nt
	}
}

// ProductParts is the number of threads an m×n×k product is worth
// splitting over on a pool of threads threads: m·n·k / 2^19 (the least work
// that pays for handing a part to a thread), at least 1, at most threads.
// Gemm splits a product into that many parts, or fewer when the split
// dimension of C has fewer tiles.
func ProductParts(threads, m, n, k int) int { return planParts(threads, m, n, k) }

// planParts is ProductParts: 1 below parallelMinWork.
func planParts(threads, m, n, k int) int {
	if threads < 2 {
		return 1
	}
	w := float64(m) * float64(n) * float64(k) / minPartWork
	if w >= float64(threads) {
		return threads
	}
	return max(1, int(w))
}

func (kern *kernel[T]) job() *gemmJob[T] {
	if j := kern.jobs.get(); j != nil {
		return j
	}
	return new(gemmJob[T])
}

// scaleC sets C = beta·C, or C = 0 when beta is zero.
func scaleC[T Float](m, n int, beta T, c []T, ldc int) {
	for i := 0; i < m; i++ {
		row := c[i*ldc : i*ldc+n]
		if beta == 0 {
			clear(row)
			continue
		}
		for j := range row {
			row[j] *= beta
		}
	}
}

// gemmJob is one product split into parts, one per thread.
type gemmJob[T Float] struct {
	kern      *kernel[T]
	tA, tB    bool
	m, n, k   int
	alpha     T
	a         []T
	lda       int
	b         []T
	ldb       int
	beta      T
	c         []T
	ldc       int
	parts     int
	splitRows bool
	tiles     int // tiles along the split dimension
	packed    []T // op(B) packed by PackB, or nil
}

// runPart computes part t of the job: a range of whole tiles along the
// split dimension.
func (j *gemmJob[T]) runPart(t int) {
	kern := j.kern
	i0, i1, j0, j1 := 0, j.m, 0, j.n
	if j.parts > 1 {
		lo, hi := t*j.tiles/j.parts, (t+1)*j.tiles/j.parts
		if j.splitRows {
			i0, i1 = lo*kern.mr, min(hi*kern.mr, j.m)
		} else {
			j0, j1 = lo*kern.nr, min(hi*kern.nr, j.n)
		}
	}
	if i0 >= i1 || j0 >= j1 {
		return
	}
	w := kern.workspace()
	if testHookWorkspace != nil {
		testHookWorkspace(j.parts)
	}
	if j.packed != nil {
		kern.blockPacked(w, j.tA, i0, i1, j0, j1, j.n, j.k, j.alpha, j.a, j.lda, j.packed, j.beta, j.c, j.ldc)
		kern.spaces.put(w)
		return
	}
	kern.block(w, j.tA, j.tB, i0, i1, j0, j1, j.k, j.alpha, j.a, j.lda, j.b, j.ldb, j.beta, j.c, j.ldc)
	kern.spaces.put(w)
}

// testHookWorkspace, when set by a test, runs in every part of a product
// (parts of them) after the part has taken its workspace and before it
// uses it: a barrier there makes all parts hold a workspace at once, as
// they do on a machine with a core per thread.
var testHookWorkspace func(parts int)

// block computes rows [i0, i1) and columns [j0, j1) of C with the loop
// nest of Goto and van de Geijn: NC columns, KC depth, MC rows, then NR and
// MR register tiles. i0 and j0 are multiples of MR and NR, so every thread
// sees the same tile grid and the same k blocks.
func (kern *kernel[T]) block(w *workspace[T], tA, tB bool, i0, i1, j0, j1, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	mr, nr := kern.mr, kern.nr
	if i1-i0 <= kern.mc {
		// One block of rows (the recurrent step: m = batch size): pack A
		// once per k block and each B panel just before its tiles use it,
		// so the panel is read from L1 rather than written out to L2 and
		// read back.
		mc := i1 - i0
		for pc := 0; pc < k; pc += kern.kc {
			kc := min(kern.kc, k-pc)
			bet := beta
			if pc > 0 {
				bet = 1
			}
			kern.packA(w.a, tA, a, lda, i0, mc, pc, kc, mr)
			for jr := j0; jr < j1; jr += nr {
				nn := min(nr, j1-jr)
				kern.packB(w.b, tB, b, ldb, pc, kc, jr, nn, nr)
				kern.tiles(w, w.b[:nr*kc], kc, mc, nn, alpha, bet, c, i0*ldc+jr, ldc)
			}
		}
		return
	}
	for jc := j0; jc < j1; jc += kern.nc {
		nc := min(kern.nc, j1-jc)
		for pc := 0; pc < k; pc += kern.kc {
			kc := min(kern.kc, k-pc)
			kern.packB(w.b, tB, b, ldb, pc, kc, jc, nc, nr)
			bet := beta
			if pc > 0 {
				bet = 1
			}
			for ic := i0; ic < i1; ic += kern.mc {
				mc := min(kern.mc, i1-ic)
				kern.packA(w.a, tA, a, lda, ic, mc, pc, kc, mr)
				for jr := 0; jr < nc; jr += nr {
					nn := min(nr, nc-jr)
					kern.tiles(w, w.b[jr*kc:(jr+nr)*kc], kc, mc, nn, alpha, bet, c, ic*ldc+jc+jr, ldc)
				}
			}
		}
	}
}

// tiles runs the micro-kernel down one packed B panel bp (nn <= nr valid
// columns) against the mc rows of packed A in w.a, writing C from offset c0.
// Edge tiles go through w.tile, so the micro-kernel always writes a whole
// tile.
func (kern *kernel[T]) tiles(w *workspace[T], bp []T, kc, mc, nn int, alpha, bet T, c []T, c0, ldc int) {
	mr, nr := kern.mr, kern.nr
	for ir := 0; ir < mc; ir += mr {
		mm := min(mr, mc-ir)
		ap := w.a[ir*kc : (ir+mr)*kc]
		ci := c0 + ir*ldc
		if mm == mr && nn == nr {
			kern.micro(kc, ap, bp, c[ci:], ldc, alpha, bet)
			continue
		}
		kern.micro(kc, ap, bp, w.tile, nr, alpha, 0)
		for i := 0; i < mm; i++ {
			dst := c[ci+i*ldc : ci+i*ldc+nn]
			src := w.tile[i*nr : i*nr+nn]
			if bet == 0 {
				copy(dst, src)
				continue
			}
			for jj, v := range src {
				dst[jj] = v + bet*dst[jj]
			}
		}
	}
}
