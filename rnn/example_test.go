package rnn_test

import (
	"context"
	"fmt"
	"math"

	"weft/rnn"
)

// The tensors of a 2-layer GRU in their stable order, with their shapes
// (gate blocks r, z, n; see the package documentation).
func ExampleModel_Params() {
	cfg := rnn.DefaultConfig()
	cfg.Cell, cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = "gru", 2, 8, 4
	m, err := rnn.NewModel[float32](cfg, 10, 1)
	if err != nil {
		panic(err)
	}
	for _, p := range m.Params() {
		fmt.Println(p.Name, p.Shape)
	}
	// 40 + (96+192+24+8) + (192+192+24+8) + 80 + 10 = 866 scalars.
	fmt.Println(m.Name(), m.NumParams())
	// Output:
	// embedding.weight [10 4]
	// layer.0.input_weight [24 4]
	// layer.0.recurrent_weight [24 8]
	// layer.0.bias [24]
	// layer.0.recurrent_bias [8]
	// layer.1.input_weight [24 8]
	// layer.1.recurrent_weight [24 8]
	// layer.1.bias [24]
	// layer.1.recurrent_bias [8]
	// output.weight [10 8]
	// output.bias [10]
	// gru-2x8 866
}

// An untrained model with a zero output bias predicts the first token of a
// document uniformly: ln P = −ln V, so the perplexity is exactly V (a fact
// of the trade for uniform models).
func ExampleModel_LogProbs() {
	m, err := rnn.NewModel[float64](rnn.DefaultConfig(), 50, 1)
	if err != nil {
		panic(err)
	}
	lp := make([]float64, 1)
	if err := m.LogProbs(context.Background(), lp, []int{7}); err != nil {
		panic(err)
	}
	fmt.Printf("perplexity of the first token: %.6f\n", math.Exp(-lp[0]))
	// Output:
	// perplexity of the first token: 50.000000
}
