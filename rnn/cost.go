package rnn

import "weft/rnn/linalg"

// Gates is the number of H-wide blocks in the gate vector of one layer of
// the cell c names (its Cell's Gates): 1 for "rnn", 3 for "gru", 4 for
// "lstm" (and for an unknown name, as NewModel would reject it).
func (c Config) Gates() int { return newCell[float32](c).Gates() }

// MatMulTerm is one kind of weight matrix that every position of a window
// goes through: Count matrices of In×Out weights, each one multiply-add per
// weight in the forward pass.
type MatMulTerm struct {
	Name  string  // the term in the model's symbols: "E·G", "H·G", "H·P", "H·V", "P·(C+n̄)"...
	Count int     // matrices of this shape
	In    int     // input width
	Out   float64 // output width; for the class layer C + n̄, a mean
}

// MatMulCost returns the floating-point operations of the matrix products
// per position of a training window of the model c over a vocabulary of
// vocab ids, and the terms they come from. classStart is the class
// boundaries of the class output layer (Model.OutputClasses), nil for the
// full softmax.
//
// Every product of the forward pass (m·n·k multiply-adds) has two of the
// same size in the backward pass (the gradient with respect to its input
// and with respect to its weights), and a multiply-add is 2 operations: 6
// operations per weight per position,
//
//	FLOP = 6 × Σ Count·In·Out
//
// The weights a position goes through are those of the input projection
// (E·G, none for one-hot input, which is a gather), the recurrence (H·G per
// layer) and the input of layers 2..L (H·G each), together (2L−1)·H·G, with
// G = gates·H (Cell.Gates: 1 vanilla, 3 GRU, 4 LSTM), the projection (H·P)
// and the output layer, K = P or H its input width: K·V for the full
// softmax; for the class layer, K·C for the class scores plus K·n̄ for the
// scores within the target's class, n̄ = Σ_k n_k²/V being the mean size of
// the class of a uniformly drawn target. Gate arithmetic, the softmax and
// the embedding gather are not counted. An invalid c is counted as
// written, with the LSTM's 4 gates for an unknown cell.
func (c Config) MatMulCost(vocab int, classStart []int) (flop float64, terms []MatMulTerm) {
	gates := c.Gates()
	E, H, P, L := c.EmbeddingSize, c.HiddenSize, c.ProjectionSize, c.Layers
	G := gates * H
	K, k := H, "H"
	if P > 0 {
		K, k = P, "P"
	}
	macs := 0.0
	add := func(name string, count, in int, out float64) {
		if count == 0 || in == 0 || out == 0 {
			return
		}
		macs += float64(count) * float64(in) * out
		terms = append(terms, MatMulTerm{Name: name, Count: count, In: in, Out: out})
	}
	add("E·G", 1, E, float64(G))
	add("H·G", 2*L-1, H, float64(G))
	add("H·P", 1, H, float64(P))
	if classStart == nil {
		add(k+"·V", 1, K, float64(vocab))
	} else {
		C := len(classStart) - 1
		var sq float64
		for i := 0; i < C; i++ {
			n := float64(classStart[i+1] - classStart[i])
			sq += n * n
		}
		add(k+"·(C+n̄)", 1, K, float64(C)+sq/float64(vocab))
	}
	return 6 * macs, terms
}

// ChooseThreads is the number of threads training.threads = 0 gives a
// model of shape c trained on batchSize streams on a machine of cores
// cores:
//
//	threads = min(cores, max(min(8, cores), parts))
//	parts   = linalg.ProductParts(cores, B, G, H)
//
// parts is the number of threads the per-step recurrent product of one
// layer (B×G×H, G = gates·H) pays for: one per 2^19 multiply-adds. That
// product runs T times per window in each direction and is the only one
// whose size does not grow with the window, so threads beyond it idle
// through most of the recurrence. The rest of a window (the input, output
// and weight-gradient products over all B·T positions, the gate loops, the
// optimizer update and the clipping norm) splits over any number of
// threads. Never fewer than 8 threads where there are 8 cores or more (the
// large products pay for them). For example, on 16 cores: a 1×256 LSTM at
// B = 32 gets 16 (its step is 32×1024×256, 2^23 multiply-adds), a GRU of
// 256 gets 12, an LSTM of 128 gets 8; on 64 cores a 512-wide LSTM gets 64.
// The rule comes from the cost of the products, not from a measurement on
// a many-core machine: `weft bench --threads-sweep` shows the fastest
// setting on a given one. cores < 1 counts as 1.
func ChooseThreads(c Config, batchSize, cores int) int {
	cores = max(cores, 1)
	G := c.Gates() * c.HiddenSize
	parts := linalg.ProductParts(cores, max(batchSize, 1), G, c.HiddenSize)
	return min(cores, max(min(8, cores), parts))
}
