package onnx

import (
	"errors"
	"fmt"
	"math"
	"strconv"

	"google.golang.org/protobuf/proto"

	"weft/checkpoint"
	pb "weft/checkpoint/onnx/onnxpb"
	"weft/data"
	"weft/rnn"
)

// The versions Build writes: ONNX IR version 8 with the default operator
// set at version 14 (the first with the LSTM, GRU and RNN operators'
// layout attribute, whose default, 0, is used; opset 13 made LogSoftmax
// normalise over one axis and took Squeeze's and Split's axes and sizes
// as inputs).
const (
	IRVersion    = 8
	OpsetVersion = 14
)

// Names of the graph's inputs and outputs (see the package documentation
// for their shapes and meaning).
const (
	InputTokens         = "tokens"
	InputStateH         = "state_h"
	InputStateC         = "state_c"
	OutputLogProbs      = "log_probs"
	OutputEntryLogProbs = "entry_log_probs"
	OutputStateH        = "state_h_out"
	OutputStateC        = "state_c_out"
)

// Metadata properties of an exported model (ModelProto.metadata_props).
//
//	key              value
//	weft.vocabulary  JSON of the vocabulary, in data's vocabulary file format
//	                 (tokenizer, lowercase, boundary, entries by id, bpe merges)
//	weft.tokenizer   "char", "byte", "word", "bpe" or "symbols"
//	weft.lowercase   "true" or "false": pieces are lower-cased before lookup
//	weft.boundary    "", "line" (id 1 is every line end) or "document"
//	                 (id 1 ends each document)
//	weft.model       the model's short name, such as "lstm-2x256"
const (
	MetaVocabulary = "weft.vocabulary"
	MetaTokenizer  = "weft.tokenizer"
	MetaLowercase  = "weft.lowercase"
	MetaBoundary   = "weft.boundary"
	MetaModel      = "weft.model"
)

// Options are what Build records about where a model came from.
type Options struct {
	// ProducerVersion is weft's version, written as producer_version.
	// Empty leaves the field out.
	ProducerVersion string
	// Step is the number of training steps behind the weights, written as
	// model_version. Zero leaves the field out.
	Step int64
}

// maxModelBytes is the largest serialised message the protobuf libraries
// read (2 GiB); a model with more weights than that needs ONNX's external
// data files, which Build does not write.
const maxModelBytes = math.MaxInt32

// Build returns the ONNX model of net, whose token ids are those of v.
// The graph computes exactly what net.LogProbs and net's Streams compute
// (see the package documentation), in float32.
func Build(net *rnn.Model[float32], v *data.Vocab, opts Options) (*pb.ModelProto, error) {
	if v == nil {
		return nil, errors.New("onnx export: no vocabulary")
	}
	V := net.VocabSize()
	if v.Len() != V {
		return nil, fmt.Errorf("onnx export: vocabulary of %d entries for a model of %d", v.Len(), V)
	}
	if n := 4 * int64(net.NumParams()); n > maxModelBytes-1<<20 {
		return nil, fmt.Errorf("onnx export: %d bytes of weights exceed the 2 GiB limit of one ONNX file", n)
	}
	vj, err := v.MarshalJSON()
	if err != nil {
		return nil, fmt.Errorf("onnx export: vocabulary: %w", err)
	}
	cfg := net.Config()
	L, H, E, P := cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize, cfg.ProjectionSize
	K := H
	if P > 0 {
		K = P
	}
	params := map[string][]float32{}
	for _, p := range net.Params() {
		params[p.Name] = p.Value
	}
	b := &builder{g: &pb.GraphProto{Name: proto.String("weft_" + net.Name())}}
	g := b.g

	// Inputs.
	g.Input = append(g.Input, valueInfo(InputTokens, "token ids, one sequence per row", pb.TensorProto_INT64,
		symbolic("batch"), symbolic("sequence")))
	states := []string{InputStateH}
	if cfg.Cell == "lstm" {
		states = append(states, InputStateC)
	}
	for _, name := range states {
		doc := "incoming hidden state of each layer (zeros: the start of a document)"
		if name == InputStateC {
			doc = "incoming LSTM cell state of each layer (zeros: the start of a document)"
		}
		g.Input = append(g.Input, valueInfo(name, doc, pb.TensorProto_FLOAT, fixed(L), symbolic("batch"), fixed(H)))
	}

	// Embedding: time-major rows of E (or V one-hot) values.
	ids := b.op("Transpose", []string{InputTokens}, attrInts("perm", 1, 0))
	var x string
	if E > 0 {
		emb := b.floats("embedding.weight", []int64{int64(V), int64(E)}, params["embedding.weight"])
		x = b.op("Gather", []string{emb, ids}, attrInt("axis", 0))
	} else {
		depth := b.ints(b.tmp("depth"), []int64{1}, int64(V))
		values := b.floats(b.tmp("off_on"), []int64{2}, []float32{0, 1})
		x = b.op("OneHot", []string{ids, depth, values}, attrInt("axis", -1))
	}

	// The recurrent layers.
	squeeze1 := b.vector("axes", 1)
	axis0 := b.vector("axes", 0)
	var outH, outC []string
	var topIn string // the last layer's incoming state, [1, batch, H]
	for l := 0; l < L; l++ {
		in := H
		if l == 0 {
			in = E
			if in == 0 {
				in = V
			}
		}
		w, r, bias, op, attrs := convertLayer(cfg, l, in, params)
		pre := "layer." + strconv.Itoa(l) + "."
		layerIn := []string{x,
			b.floats(pre+"W", []int64{1, int64(len(w) / in), int64(in)}, w),
			b.floats(pre+"R", []int64{1, int64(len(r) / H), int64(H)}, r),
			b.floats(pre+"B", []int64{1, int64(len(bias))}, bias),
			"", // sequence_lens: every sequence is full length
		}
		from, to := b.vector("start", int64(l)), b.vector("end", int64(l+1))
		for _, s := range states {
			layerIn = append(layerIn, b.op("Slice", []string{s, from, to, axis0}))
		}
		topIn = layerIn[5]
		out := b.opN(op, layerIn, 1+len(states), append(attrs, attrInt("hidden_size", int64(H)))...)
		x = b.op("Squeeze", []string{out[0], squeeze1}) // [sequence, batch, H]
		outH = append(outH, out[1])
		if len(out) > 2 {
			outC = append(outC, out[2])
		}
	}
	b.node("Concat", outH, []string{OutputStateH}, attrInt("axis", 0))
	if outC != nil {
		b.node("Concat", outC, []string{OutputStateC}, attrInt("axis", 0))
	}

	// The output layer, over the incoming state of the last layer and
	// every output: [1+sequence, batch, K].
	head := b.op("Concat", []string{topIn, x}, attrInt("axis", 0))
	if P > 0 {
		proj := b.floats("projection.weight", []int64{int64(P), int64(H)}, params["projection.weight"])
		head = b.op("MatMul", []string{head, b.op("Transpose", []string{proj})})
	}
	outW := "embedding.weight"
	if !cfg.TieEmbeddings {
		outW = b.floats("output.weight", []int64{int64(V), int64(K)}, params["output.weight"])
	}
	outB := b.floats("output.bias", []int64{int64(V)}, params["output.bias"])
	scores := b.op("Add", []string{b.op("MatMul", []string{head, b.op("Transpose", []string{outW})}), outB})
	var lp string
	if starts := net.OutputClasses(); starts == nil {
		lp = b.op("LogSoftmax", []string{scores}, attrInt("axis", 2))
	} else {
		lp = classLayer(b, scores, head, starts, V, K, params)
	}
	entry := b.op("Slice", []string{lp, b.vector("start", 0), b.vector("end", 1), axis0})
	b.node("Squeeze", []string{entry, axis0}, []string{OutputEntryLogProbs})
	rest := b.op("Slice", []string{lp, b.vector("start", 1), b.vector("end", math.MaxInt64), axis0})
	b.node("Transpose", []string{rest}, []string{OutputLogProbs}, attrInts("perm", 1, 0, 2))

	g.Output = append(g.Output,
		valueInfo(OutputLogProbs, "ln P(next token | tokens up to and including this position, incoming state), nats", pb.TensorProto_FLOAT,
			symbolic("batch"), symbolic("sequence"), fixed(V)),
		valueInfo(OutputEntryLogProbs, "ln P(first token | incoming state), nats", pb.TensorProto_FLOAT,
			symbolic("batch"), fixed(V)),
		valueInfo(OutputStateH, "hidden state of each layer after the last token", pb.TensorProto_FLOAT,
			fixed(L), symbolic("batch"), fixed(H)))
	if outC != nil {
		g.Output = append(g.Output, valueInfo(OutputStateC, "LSTM cell state of each layer after the last token", pb.TensorProto_FLOAT,
			fixed(L), symbolic("batch"), fixed(H)))
	}

	m := &pb.ModelProto{
		IrVersion:    proto.Int64(IRVersion),
		OpsetImport:  []*pb.OperatorSetIdProto{{Domain: proto.String(""), Version: proto.Int64(OpsetVersion)}},
		ProducerName: proto.String("weft"),
		DocString:    proto.String("weft " + net.Name() + " next-token model: token ids in, next-token log-probabilities (nats) and states out"),
		Graph:        g,
		MetadataProps: []*pb.StringStringEntryProto{
			{Key: proto.String(MetaVocabulary), Value: proto.String(string(vj))},
			{Key: proto.String(MetaTokenizer), Value: proto.String(v.Kind().String())},
			{Key: proto.String(MetaLowercase), Value: proto.String(strconv.FormatBool(v.Lowercase()))},
			{Key: proto.String(MetaBoundary), Value: proto.String(boundary(v))},
			{Key: proto.String(MetaModel), Value: proto.String(net.Name())},
		},
	}
	if opts.ProducerVersion != "" {
		m.ProducerVersion = proto.String(opts.ProducerVersion)
	}
	if opts.Step > 0 {
		m.ModelVersion = proto.Int64(opts.Step)
	}
	return m, nil
}

// Encode is Build followed by the protobuf encoding: the bytes of a .onnx
// file. The same model and options always give the same bytes.
func Encode(net *rnn.Model[float32], v *data.Vocab, opts Options) ([]byte, error) {
	m, err := Build(net, v, opts)
	if err != nil {
		return nil, err
	}
	b, err := proto.MarshalOptions{Deterministic: true}.Marshal(m)
	if err != nil {
		return nil, fmt.Errorf("onnx export: %w", err)
	}
	if len(b) > maxModelBytes {
		return nil, fmt.Errorf("onnx export: %d bytes exceed the 2 GiB limit of one ONNX file", len(b))
	}
	return b, nil
}

// EncodeCheckpoint encodes a model loaded from a checkpoint, recording its
// training step.
func EncodeCheckpoint(m *checkpoint.Model, producerVersion string) ([]byte, error) {
	return Encode(m.Net, m.Vocab, Options{ProducerVersion: producerVersion, Step: m.Step})
}

// boundary is the vocabulary's boundary setting as the run file spells it.
func boundary(v *data.Vocab) string {
	if id := v.Boundary(); id >= 0 {
		if v.Piece(id) == data.LinePiece {
			return "line"
		}
		return "document"
	}
	return ""
}

// convertLayer returns layer l's weights in the layout of the ONNX
// operator that computes it: W (gates·H × in), R (gates·H × H) and B (the
// input biases then the recurrent biases, 2·gates·H), gate blocks in the
// operator's order, with the operator's name and attributes.
func convertLayer(cfg rnn.Config, l, in int, params map[string][]float32) (w, r, b []float32, op string, attrs []*pb.AttributeProto) {
	H := cfg.HiddenSize
	pre := "layer." + strconv.Itoa(l) + "."
	wIn, wRec, bias := params[pre+"input_weight"], params[pre+"recurrent_weight"], params[pre+"bias"]
	var order []int // weft's block index of each of the operator's blocks
	switch cfg.Cell {
	case "rnn":
		op, order = "RNN", []int{0}
		act := "Tanh"
		if cfg.Activation == "relu" {
			act = "Relu"
		}
		attrs = append(attrs, attrStrings("activations", act))
	case "gru":
		// weft r, z, n; the operator z, r, h.
		op, order = "GRU", []int{1, 0, 2}
		lbr := int64(1)
		if cfg.GRUForm == "reset_before" {
			lbr = 0
		}
		attrs = append(attrs, attrInt("linear_before_reset", lbr))
	default:
		// weft i, f, g, o; the operator i, o, f, c.
		op, order = "LSTM", []int{0, 3, 1, 2}
	}
	G := len(order) * H
	w = make([]float32, 0, G*in)
	r = make([]float32, 0, G*H)
	b = make([]float32, 2*G)
	for k, src := range order {
		w = append(w, wIn[src*H*in:(src+1)*H*in]...)
		r = append(r, wRec[src*H*H:(src+1)*H*H]...)
		copy(b[k*H:(k+1)*H], bias[src*H:(src+1)*H])
	}
	if rb := params[pre+"recurrent_bias"]; rb != nil {
		// The reset-after GRU's b_hn: the recurrent bias of the h block,
		// inside the reset gate's product (linear_before_reset = 1).
		copy(b[G+2*H:G+3*H], rb)
	}
	return w, r, b, op, attrs
}

// classLayer adds the class-based output layer: with s the class scores
// and u the word scores (all V of them, in scores),
//
//	ln P(w) = LogSoftmax(s)[c(w)] + LogSoftmax(u restricted to c(w))[w],
//
// the within-class LogSoftmax taken over each class's contiguous range of
// ids (a Split along the vocabulary axis), the class term gathered by
// each id's class. It returns the [1+sequence, batch, V] log-probabilities.
func classLayer(b *builder, scores, head string, starts []int, V, K int, params map[string][]float32) string {
	C := len(starts) - 1
	cw := b.floats("output.class_weight", []int64{int64(C), int64(K)}, params["output.class_weight"])
	cb := b.floats("output.class_bias", []int64{int64(C)}, params["output.class_bias"])
	s := b.op("Add", []string{b.op("MatMul", []string{head, b.op("Transpose", []string{cw})}), cb})
	ls := b.op("LogSoftmax", []string{s}, attrInt("axis", 2))
	var lw string
	if C == 1 {
		lw = b.op("LogSoftmax", []string{scores}, attrInt("axis", 2))
	} else {
		sizes := make([]int64, C)
		for k := range sizes {
			sizes[k] = int64(starts[k+1] - starts[k])
		}
		parts := b.opN("Split", []string{scores, b.vector("class_sizes", sizes...)}, C, attrInt("axis", 2))
		for k, p := range parts {
			parts[k] = b.op("LogSoftmax", []string{p}, attrInt("axis", 2))
		}
		lw = b.op("Concat", parts, attrInt("axis", 2))
	}
	classOf := make([]int64, V)
	for k := 0; k < C; k++ {
		for id := starts[k]; id < starts[k+1]; id++ {
			classOf[id] = int64(k)
		}
	}
	ids := b.ints("output.class_of", []int64{int64(V)}, classOf...)
	return b.op("Add", []string{lw, b.op("Gather", []string{ls, ids}, attrInt("axis", 2))})
}
