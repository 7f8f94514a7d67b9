package rnn

import "weft/rnn/linalg"

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
		row := a[r*lda : r*lda+cols]
		for j, v := range row {
			dst[j] += v
		}
	}
}
