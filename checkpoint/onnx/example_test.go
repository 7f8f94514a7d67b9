package onnx_test

import (
	"context"
	"fmt"
	"strings"

	"weft/checkpoint/onnx"
	pb "weft/checkpoint/onnx/onnxpb"
	"weft/data"
	"weft/rnn"
)

// The graph of a two-layer LSTM over a char vocabulary: its inputs and
// outputs with their shapes.
func ExampleBuild() {
	v, err := data.LearnVocab(context.Background(), strings.NewReader("tug wren to berth 4\n"), "example",
		data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		panic(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = 2, 32, 16
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		panic(err)
	}
	m, err := onnx.Build(net, v, onnx.Options{})
	if err != nil {
		panic(err)
	}
	show := func(kind, name string, dims []string) {
		fmt.Printf("%s %s [%s]\n", kind, name, strings.Join(dims, ", "))
	}
	for _, in := range m.Graph.Input {
		show("input", in.GetName(), shape(in.GetType().GetTensorType().GetShape().GetDim()))
	}
	for _, out := range m.Graph.Output {
		show("output", out.GetName(), shape(out.GetType().GetTensorType().GetShape().GetDim()))
	}
	fmt.Println("IR version", m.GetIrVersion(), "opset", m.GetOpsetImport()[0].GetVersion())
	// Output:
	// input tokens [batch, sequence]
	// input state_h [2, batch, 32]
	// input state_c [2, batch, 32]
	// output log_probs [batch, sequence, 14]
	// output entry_log_probs [batch, 14]
	// output state_h_out [2, batch, 32]
	// output state_c_out [2, batch, 32]
	// IR version 8 opset 14
}

// shape spells each dimension: its symbolic name or its size.
func shape(dims []*pb.TensorShapeProto_Dimension) []string {
	out := make([]string, len(dims))
	for i, d := range dims {
		out[i] = d.GetDimParam()
		if out[i] == "" {
			out[i] = fmt.Sprint(d.GetDimValue())
		}
	}
	return out
}
