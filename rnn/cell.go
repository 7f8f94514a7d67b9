package rnn

import (
	"unsafe"

	"weft/rnn/linalg"
)

// Cell is the recurrent part of one layer: how the gate pre-activations of a
// window turn into states, and how gradients flow back through them. The
// model computes the input part of every step in one matrix product before
// it calls the cell, and the input-weight gradients in one product after;
// the cell owns the recurrence, one matrix product per step each way (two
// for the reset-before GRU, whose reset gate sits inside the product), and
// its recurrent-weight gradient as one product over all steps (two for the
// reset-before GRU).
//
// The implementations are vanilla (Elman 1990, cell_vanilla.go), GRU (Cho et
// al. 2014, cell_gru.go) and LSTM with forget gate (Gers, Schmidhuber &
// Cummins 2000, cell_lstm.go). The methods that do the work are unexported:
// the set of cells is closed.
type Cell[T Float] interface {
	// Name is "rnn-tanh", "rnn-relu", "gru", "gru-reset-before" or "lstm".
	Name() string
	// Gates is the number of H-wide blocks in the layer's gate vector:
	// 1, 3 or 4.
	Gates() int

	hasCellState() bool
	hasRecurrentBias() bool
	initBias(b []T, hid int, forgetBias float64)
	// forward runs steps steps over B streams. On entry lw.xg holds the
	// input part W·x_t + b of every step's pre-activations and lw.h (and
	// lw.c) row block 0 the carried state; on return lw.h rows 1..steps hold
	// the outputs and lw.xg and lw.aux what backward needs.
	forward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int)
	// backward reads the gradient of the loss with respect to every output
	// h_t in lw.dh (it may overwrite it), writes the gradient with respect to
	// the input pre-activations to lw.dxg and adds the recurrent-weight
	// gradients to lp. The gradient with respect to the carried state is
	// left in lw.dnext (and lw.dcnext) and is not propagated further:
	// truncated BPTT cuts it at the window start.
	backward(p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], steps, B int)
}

// sigmoidDeriv etc. are written out in the cells; the kernels used are
// linalg.Sigmoid and linalg.Tanh on contiguous runs.

// colSumAdd adds the column sums of the rows×cols matrix a (row stride lda)
// to dst, summing rows in increasing order.
func colSumAdd[T Float](dst []T, a []T, rows, cols, lda int) {
	for r := 0; r < rows; r++ {
		linalg.Add(dst[:cols], a[r*lda:r*lda+cols])
	}
}

// cellWork is the part of a layer's work buffers that the cells own: the
// recurrent weights packed once per pass for the per-step products, and the
// state of the elementwise loops they split over the pool's threads.
type cellWork[T Float] struct {
	pack [4]recPacked
	rows rowLoop[T]
	mat  matLoop[T] // bias adds and column sums (bptt.go)
}

// recPacked is op(U) packed by linalg.PackB for the float32 kernels; ok is
// false when the product goes through linalg.Gemm instead (float64, the
// openblas build). held says that a packed op(U) stays valid across
// passes (a BatchScorer sets it for the rest of a call, during which the
// weights do not change): packRec then leaves it as it is.
type recPacked struct {
	pb   linalg.PackedB
	ok   bool
	held bool
}

// packedKernels says whether linalg.GemmPacked runs the same kernel as
// linalg.Gemm: not in builds with the openblas tag, where Gemm calls
// OpenBLAS.
var packedKernels = linalg.KernelName() != "openblas"

// packRec packs op(U), k×n (U stored n×k with row stride ldu when tU is
// set), into rp when T is float32 (see recPacked) and the pass has more
// than one step, for the recurrent products of one pass. Packing costs about
// a quarter of one 32×1024×256 product; a pass of T steps then saves it T−1
// times. A one-step pass (a Stream's Feed) leaves rp unpacked: linalg.Gemm
// packs each panel into L1 just before it uses it, which beats writing the
// whole packed matrix out and reading it back once.
func packRec[T Float](rp *recPacked, steps int, tU bool, k, n int, u []T, ldu int) {
	if rp.held && rp.ok {
		return
	}
	rp.ok = false
	if steps < 2 || !packedKernels || !isF32[T]() {
		return
	}
	linalg.PackB(&rp.pb, tU, k, n, as32(u), ldu)
	rp.ok = true
}

// mulRec computes C = A·op(U) + beta·C, A m×k, with op(U) as packRec
// packed it into rp, or through linalg.Gemm when rp is not packed. Both
// give the same bits (linalg.GemmPacked is Gemm without the repacking).
func mulRec[T Float](p *linalg.Pool, rp *recPacked, tU bool, m, n, k int, a []T, lda int, u []T, ldu int, beta T, c []T, ldc int) {
	if rp.ok {
		linalg.GemmPacked(p, false, m, 1, as32(a), lda, &rp.pb, float32(beta), as32(c), ldc)
		return
	}
	linalg.Gemm(p, false, tU, m, n, k, 1, a, lda, u, ldu, beta, c, ldc)
}

// rowLoop is an elementwise pass over the B rows (streams) of one step,
// split by Pool.For into ranges of whole rows. Each pass computes a row
// exactly as a loop over all rows would, so the result does not depend on
// the number of threads.
type rowLoop[T Float] struct {
	pass rowPass
	lp   *layerParams[T]
	lw   *layerWork[T]
	t, B int
}

// rowPass names the row functions of the cells (a switch rather than a
// function value: an instantiated generic function value allocates).
type rowPass uint8

const (
	lstmForwardPass rowPass = iota
	lstmBackwardPass
	gruForwardAfterPass
	gruForwardBeforeRPass
	gruForwardBeforeHPass
	gruBackwardAfterPass
	gruBackwardBeforeZPass
	gruBackwardBeforeRPass
	vanillaForwardPass
	vanillaForwardReLUPass
	vanillaBackwardPass
	vanillaBackwardReLUPass
)

func (r *rowLoop[T]) Range(lo, hi int) {
	switch r.pass {
	case lstmForwardPass:
		lstmForwardRows(r, lo, hi)
	case lstmBackwardPass:
		lstmBackwardRows(r, lo, hi)
	case gruForwardAfterPass:
		gruForwardAfterRows(r, lo, hi)
	case gruForwardBeforeRPass:
		gruForwardBeforeRRows(r, lo, hi)
	case gruForwardBeforeHPass:
		gruForwardBeforeHRows(r, lo, hi)
	case gruBackwardAfterPass:
		gruBackwardRows(r, lo, hi, true)
	case gruBackwardBeforeZPass:
		gruBackwardRows(r, lo, hi, false)
	case gruBackwardBeforeRPass:
		gruBackwardBeforeRRows(r, lo, hi)
	case vanillaForwardPass, vanillaForwardReLUPass:
		vanillaForwardRows(r, lo, hi, r.pass == vanillaForwardReLUPass)
	case vanillaBackwardPass, vanillaBackwardReLUPass:
		vanillaBackwardRows(r, lo, hi, r.pass == vanillaBackwardReLUPass)
	default:
		panic("rnn: unknown row pass")
	}
}

// forRows runs pass over rows [0, B) of step t on p's threads, in ranges
// of at least enough rows of width elements each to outweigh handing a
// range to a worker.
func forRows[T Float](p *linalg.Pool, lp *layerParams[T], lw *layerWork[T], t, B, width int, pass rowPass) {
	r := &lw.cw.rows
	*r = rowLoop[T]{pass: pass, lp: lp, lw: lw, t: t, B: B}
	p.For(B, max(1, rowGrainElems/max(width, 1)), r)
	r.lp, r.lw = nil, nil
}

// rowGrainElems is the number of elements (of gate rows) below which a
// range of rows is not split further: about one to two microseconds of gate
// math, a few times the cost of handing a range to a spinning worker.
const rowGrainElems = 4096

// isF32 reports whether T is float32.
func isF32[T Float]() bool {
	var z T
	return unsafe.Sizeof(z) == 4
}

// as32 views a []T as []float32; call it only when isF32[T]().
func as32[T Float](s []T) []float32 {
	return unsafe.Slice((*float32)(unsafe.Pointer(unsafe.SliceData(s))), len(s))
}

// matLoop is a pass over a rows×cols matrix that Pool.For splits: adding a
// vector to every row (split over rows) or adding the column sums to a
// vector (split over columns, each column still summed over the rows in
// increasing order). Either way every element gets the arithmetic of the
// loop on one thread.
type matLoop[T Float] struct {
	colSums         bool
	dst, a          []T
	rows, cols, lda int
}

func (l *matLoop[T]) Range(lo, hi int) {
	if l.colSums {
		colSumAdd(l.dst[lo:hi], l.a[lo:], l.rows, hi-lo, l.lda)
		return
	}
	v := l.a[:l.cols]
	for r := lo; r < hi; r++ {
		linalg.Add(l.dst[r*l.lda:r*l.lda+l.cols], v)
	}
}

// matGrainElems is the number of elements below which matLoop does not
// split a range further (a few microseconds of adds).
const matGrainElems = 1 << 14

// addRowsPool adds the vector v (cols long) to each of the rows of the
// matrix m (row stride ldm), splitting the rows over p's threads. ml is the
// caller's long-lived loop state.
func addRowsPool[T Float](p *linalg.Pool, ml *matLoop[T], m, v []T, rows, cols, ldm int) {
	*ml = matLoop[T]{dst: m, a: v, rows: rows, cols: cols, lda: ldm}
	p.For(rows, max(1, matGrainElems/max(cols, 1)), ml)
	*ml = matLoop[T]{}
}

// colSumAddPool is colSumAdd with the columns split over p's threads, in
// runs of whole cache lines; each column is summed as colSumAdd sums it, so
// the result does not depend on the thread count. ml is the caller's
// long-lived loop state.
func colSumAddPool[T Float](p *linalg.Pool, ml *matLoop[T], dst, a []T, rows, cols, lda int) {
	*ml = matLoop[T]{colSums: true, dst: dst, a: a, rows: rows, cols: cols, lda: lda}
	grain := (max(16, matGrainElems/max(rows, 1)) + 15) / 16 * 16
	p.For(cols, grain, ml)
	*ml = matLoop[T]{}
}
