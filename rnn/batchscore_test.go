package rnn

import (
	"context"
	"fmt"
	"math"
	"testing"
)

// batchCase is one model shape for the batched-scoring tests.
type batchCase struct {
	name string
	cfg  func(c *Config)
	V    int
}

var batchCases = []batchCase{
	{"lstm", func(c *Config) { c.Cell = "lstm" }, 11},
	{"gru", func(c *Config) { c.Cell = "gru" }, 11},
	{"gru-reset-before", func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_before" }, 11},
	{"rnn", func(c *Config) { c.Cell = "rnn" }, 11},
	{"lstm-onehot-2layers", func(c *Config) { c.Cell, c.EmbeddingSize, c.Layers = "lstm", 0, 2 }, 11},
	{"lstm-projection", func(c *Config) { c.Cell, c.ProjectionSize = "lstm", 7 }, 11},
	{"lstm-class", func(c *Config) { c.Cell, c.OutputLayer, c.OutputClasses = "lstm", "class", 4 }, 23},
	// A vocabulary wider than the kernels' row block (MC = 192 on
	// AVX-512): the input table (inputTable) is a product of several
	// blocks of rows, used where the batch has 7 or more streams.
	{"lstm-wide-vocab", func(c *Config) { c.Cell = "lstm" }, 300},
	{"gru-onehot-wide-vocab", func(c *Config) { c.Cell, c.EmbeddingSize = "gru", 0 }, 300},
}

// batchSeqs are sequences of lengths that exercise every boundary: empty,
// one token (no step), equal lengths, lengths past one scoring chunk.
func batchSeqs(V int) [][]int {
	lengths := []int{0, 1, 2, 5, 5, 17, 64, 65, 130, 3, 1, 40}
	// And lengths in no order, so that rows end out of order once the
	// queue is empty and the running rows must close up.
	for _, n := range randomTokens(24, 90, 77) {
		lengths = append(lengths, n)
	}
	seqs := make([][]int, len(lengths))
	for i, n := range lengths {
		seqs[i] = randomTokens(n, V, uint64(100+i))
	}
	return seqs
}

func newBatchModel[T Float](t *testing.T, bc batchCase, hidden int) *Model[T] {
	t.Helper()
	c := DefaultConfig()
	c.Layers, c.HiddenSize, c.EmbeddingSize = 1, hidden, 9
	c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.5, "uniform"
	bc.cfg(&c)
	counts := make([]int64, bc.V)
	for i := range counts {
		counts[i] = int64(1000 / (i + 1))
	}
	m, err := NewModelWithCounts[T](c, counts, 5)
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.outB { // a non-uniform start-of-document distribution
		m.outB[i] = T(0.05 * float64(i%7))
	}
	return m
}

// checkBatchIdentical compares LogProbsBatch, and the same sequences
// scored in parts through carried states, with LogProbs of each sequence
// alone: the numbers must be identical, not merely close (the batched
// pass computes each row with the same code).
func checkBatchIdentical[T Float](t *testing.T, m *Model[T], V, streams int) {
	ctx := context.Background()
	seqs := batchSeqs(V)
	want := make([][]float64, len(seqs))
	for i, seq := range seqs {
		want[i] = make([]float64, len(seq))
		if err := m.LogProbs(ctx, want[i], seq); err != nil {
			t.Fatal(err)
		}
	}
	got := make([][]float64, len(seqs))
	for i, seq := range seqs {
		got[i] = make([]float64, len(seq))
	}
	s := m.NewBatchScorer(streams)
	if err := s.LogProbs(ctx, got, seqs, nil); err != nil {
		t.Fatal(err)
	}
	for i := range seqs {
		for j := range seqs[i] {
			if got[i][j] != want[i][j] || math.IsNaN(got[i][j]) {
				t.Fatalf("sequence %d position %d: batched %v, alone %v", i, j, got[i][j], want[i][j])
			}
		}
	}
	// In parts: each sequence cut at a few points, the parts of all
	// sequences scored round by round with one carry per sequence.
	carry := make([]*Carry[T], len(seqs))
	for i := range carry {
		carry[i] = m.NewCarry()
	}
	cuts := []int{0, 1, 3, 4, 40, 100, 1 << 30}
	for r := 0; r+1 < len(cuts); r++ {
		parts := make([][]int, len(seqs))
		dst := make([][]float64, len(seqs))
		for i, seq := range seqs {
			lo, hi := min(cuts[r], len(seq)), min(cuts[r+1], len(seq))
			parts[i], dst[i] = seq[lo:hi], make([]float64, hi-lo)
		}
		if err := s.LogProbs(ctx, dst, parts, carry); err != nil {
			t.Fatal(err)
		}
		for i, seq := range seqs {
			lo := min(cuts[r], len(seq))
			for j, v := range dst[i] {
				if v != want[i][lo+j] {
					t.Fatalf("round %d sequence %d position %d: carried %v, whole %v", r, i, lo+j, v, want[i][lo+j])
				}
			}
		}
	}
}

func TestLogProbsBatchIdentical(t *testing.T) {
	for _, bc := range batchCases {
		for _, streams := range []int{1, 4, 7, BatchStreams} {
			t.Run(fmt.Sprintf("%s/float64/streams=%d", bc.name, streams), func(t *testing.T) {
				checkBatchIdentical(t, newBatchModel[float64](t, bc, 6), bc.V, streams)
			})
			// float32 runs the assembly kernels where the CPU has them; a
			// hidden size of 37 leaves edge tiles in every product.
			t.Run(fmt.Sprintf("%s/float32/streams=%d", bc.name, streams), func(t *testing.T) {
				checkBatchIdentical(t, newBatchModel[float32](t, bc, 37), bc.V, streams)
			})
		}
	}
	// A state wider than one k block of the kernels (KC = 256): the
	// recurrent product is reduced over two blocks.
	t.Run("lstm/float32/hidden=260", func(t *testing.T) {
		checkBatchIdentical(t, newBatchModel[float32](t, batchCases[0], 260), batchCases[0].V, 8)
	})
}

func TestLogProbsBatchErrors(t *testing.T) {
	m := newBatchModel[float64](t, batchCases[0], 4)
	ctx := context.Background()
	s := m.NewBatchScorer(2)
	tests := []struct {
		name  string
		dst   [][]float64
		seqs  [][]int
		carry []*Carry[float64]
	}{
		{"short destination", [][]float64{make([]float64, 1)}, [][]int{{1, 2}}, nil},
		{"token outside", [][]float64{make([]float64, 2)}, [][]int{{1, 11}}, nil},
		{"carries", [][]float64{make([]float64, 2)}, [][]int{{1, 2}}, []*Carry[float64]{nil, nil}},
		{"foreign carry", [][]float64{make([]float64, 2)}, [][]int{{1, 2}}, []*Carry[float64]{newBatchModel[float64](t, batchCases[0], 5).NewCarry()}},
	}
	for _, tc := range tests {
		if err := s.LogProbs(ctx, tc.dst, tc.seqs, tc.carry); err == nil {
			t.Errorf("%s: got no error", tc.name)
		}
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if err := s.LogProbs(cctx, [][]float64{make([]float64, 3)}, [][]int{{1, 2, 3}}, nil); err == nil {
		t.Error("cancelled context: got no error")
	}
}
