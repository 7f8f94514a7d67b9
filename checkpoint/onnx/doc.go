// Package onnx exports a trained weft model as an ONNX model (IR version
// 8, default operator set 14), so that any ONNX runtime can score text and
// sample with it: a web page, a Java or C# service, a phone. The model is
// written with the Go types generated from ONNX's own schema (package
// onnxpb) and computes exactly what weft computes, in float32; the tests
// run it in ONNX Runtime and compare with weft.
//
// # Inputs and outputs
//
// With L layers of H units, a vocabulary of V ids, B sequences of T tokens
// (B and T chosen by the caller at each call; T ≥ 1):
//
//	name             type     shape      meaning
//	tokens           int64    [B, T]     token ids, one sequence per row
//	state_h          float32  [L, B, H]  incoming hidden state of each layer
//	state_c          float32  [L, B, H]  incoming cell state (LSTM only)
//	log_probs        float32  [B, T, V]  ln P(next token | tokens[:, ≤t], incoming state)
//	entry_log_probs  float32  [B, V]     ln P(tokens[:, 0] | incoming state)
//	state_h_out      float32  [L, B, H]  hidden state after the last token
//	state_c_out      float32  [L, B, H]  cell state after the last token (LSTM only)
//
// All log-probabilities are natural logarithms (nats) over the whole
// vocabulary. Zero states are the start of a document, where weft starts
// scoring a line (`weft score`) and sampling (`weft sample` without a
// prompt). To score a text of n tokens from the start of a document, feed
// them with zero states: ln P(text) = entry_log_probs[tokens[0]] +
// Σ_{t<n−1} log_probs[t, tokens[t+1]]. To sample, feed the prompt, draw
// from the last row of log_probs (or from entry_log_probs with no prompt),
// then feed the drawn token alone with the returned states, and so on:
// a call over T tokens gives what T calls of one token give with the
// states carried (tested bit for bit).
//
// The model's metadata properties (see MetaVocabulary) carry the
// vocabulary and the tokenizer settings, so that a consumer can encode text
// as weft does; the README shows it for the char tokenizer.
//
// # The graph
//
// Token ids are transposed to time-major [T, B] and embedded by Gather on
// embedding.weight (or OneHot to V columns when embedding_size = 0). Each
// layer is one ONNX RNN, GRU or LSTM operator (layout 0, forward, no
// sequence_lens), whose output feeds the next layer; a Slice of state_h
// (and state_c) is its initial state and its final states are concatenated
// into the state outputs. The output layer runs over the last layer's
// incoming state followed by its T outputs, [1+T, B, H] (the first row
// gives entry_log_probs): MatMul by the transposed projection.weight when
// there is a projection, then MatMul by the transposed output.weight (the
// embedding when tied: the same initializer, stored once) and Add of
// output.bias, then LogSoftmax over the vocabulary. The class output layer
// (output_layer = "class", Goodman 2001) is exported exactly as weft
// computes it:
//
//	ln P(w) = LogSoftmax(W_c p + b_c)[c(w)] + LogSoftmax(u restricted to c(w))[w],   u = W_y p + b_y
//
// the word scores u split along the vocabulary into the classes' id
// ranges, each normalised by its own LogSoftmax and concatenated back, the
// class term gathered by output.class_of, the class of every id.
//
// # Weights
//
// Initializers keep weft's tensor names (see package rnn) where the layout
// is unchanged: embedding.weight, projection.weight, output.weight,
// output.bias, output.class_weight, output.class_bias. Layer l's weights are
// converted to the operator's layout as layer.l.W [1, G, I], layer.l.R
// [1, G, H] and layer.l.B [1, 2G] (input biases, then recurrent biases),
// with the gate blocks reordered (G = gates·H):
//
//	cell  weft blocks   ONNX blocks   attributes
//	rnn   (one)         (one)         activations = ["Tanh"] or ["Relu"]
//	gru   r, z, n       z, r, h       linear_before_reset = 1 (reset_after) or 0 (reset_before)
//	lstm  i, f, g, o    i, o, f, c    (defaults: no peepholes, sigmoid, tanh, tanh)
//
// weft's layer.l.bias goes to the input biases (Wb) and the recurrent biases
// (Rb) are zero, except for the reset-after GRU, whose layer.l.recurrent_bias
// (b_hn) is Rbh. The ONNX GRU operator computes, with linear_before_reset
// = 1, h̃ = tanh(W_h x + Wb_h + r ⊙ (R_h h + Rb_h)), weft's reset-after
// form, and with 0, h̃ = tanh(W_h x + Wb_h + R_h (r ⊙ h) + Rb_h), weft's
// reset-before form (Cho et al. 2014) with Rb_h = 0; both then take
// h' = (1 − z) ⊙ h̃ + z ⊙ h as weft does (ONNX operator documentation,
// GRU, version 14).
//
// # Checks
//
// runtime_test.go runs every kind of model in ONNX Runtime (npm's
// onnxruntime-node, installed by testdata/fetch-onnxruntime.sh) and
// compares all V log-probabilities at every position with weft's scoring
// and sampling code, and token-by-token calls with one call;
// fixtures_test.go holds the exporter to the small models under
// testdata/models, which onnx.checker (Debian's python3-onnx, run by
// testdata/references.sh) accepted, as testdata/checker.json records.
package onnx
