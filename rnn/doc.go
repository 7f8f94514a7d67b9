// Package rnn is weft's recurrent engine: vanilla, GRU and LSTM language
// models over token ids, trained by truncated backpropagation through time
// on flat, preallocated buffers, with every matrix product going through
// rnn/linalg.Gemm. One generic implementation serves float32 (training) and
// float64 (the gradient tests).
//
// # The model
//
// A Model maps a token sequence x_1, x_2, … to next-token distributions:
//
//	e_t   = E[x_t]                       embedding row (or the one-hot vector when embedding_size = 0)
//	h_t^1 = cell_1(D(e_t), h_{t−1}^1)    layer 1
//	h_t^l = cell_l(D(h_t^{l−1}), h_{t−1}^l)
//	p_t   = P D(h_t^N)                   optional linear projection (no bias)
//	y_t   = softmax(W_y p_t + b_y)       P(x_{t+1} | x_≤t)
//
// where D is inverted dropout on the non-recurrent connections only
// (Zaremba, Sutskever & Vinyals 2014): during training each unit is kept
// with probability 1−p and scaled by 1/(1−p); at evaluation D is the
// identity (one-hot input is never dropped). With tie_embeddings the output
// matrix is the embedding matrix, W_y = E (Press & Wolf 2017), which needs
// the output layer's input width to equal embedding_size. All layers use
// the same cell:
//
// Vanilla (Elman 1990), φ = tanh or ReLU:
//
//	h_t = φ(W x_t + U h_{t−1} + b)
//
// GRU (Cho et al. 2014), z weighting the old state as in their eq. 7:
//
//	r_t = σ(W_r x_t + U_r h_{t−1} + b_r)
//	z_t = σ(W_z x_t + U_z h_{t−1} + b_z)
//	n_t = tanh(W_n x_t + b_n + r_t ⊙ (U_n h_{t−1} + b_hn))   gru_form = "reset_after" (default)
//	n_t = tanh(W_n x_t + b_n + U_n (r_t ⊙ h_{t−1}))          gru_form = "reset_before" (Cho et al. eq. 8)
//	h_t = (1 − z_t) ⊙ n_t + z_t ⊙ h_{t−1}
//
// The default is the reset-after form because general frameworks use it, so
// weights move between them and weft unchanged.
//
// LSTM with forget gate (Gers, Schmidhuber & Cummins 2000), no peepholes,
// forget bias initialised to forget_bias (default 1):
//
//	i_t = σ(W_i x_t + U_i h_{t−1} + b_i)
//	f_t = σ(W_f x_t + U_f h_{t−1} + b_f)
//	g_t = tanh(W_g x_t + U_g h_{t−1} + b_g)
//	o_t = σ(W_o x_t + U_o h_{t−1} + b_o)
//	c_t = f_t ⊙ c_{t−1} + i_t ⊙ g_t
//	h_t = o_t ⊙ tanh(c_t)
//
// # Tensors
//
// Model.Params lists the tensors in this order, with these names and
// row-major shapes (V vocabulary, E embedding_size, H hidden_size, P
// projection_size, I the layer's input width: E, or V for one-hot input, for
// layer 0 and H above it, K the output layer's input width: P when set,
// else H; G = gates·H):
//
//	name                       shape   present
//	embedding.weight           V×E     embedding_size > 0
//	layer.L.input_weight       G×I     every layer L = 0, 1, …
//	layer.L.recurrent_weight   G×H
//	layer.L.bias               G
//	layer.L.recurrent_bias     H       GRU reset_after only (b_hn)
//	projection.weight          P×H     projection_size > 0
//	output.weight              V×K     unless tie_embeddings
//	output.bias                V
//	output.class_weight        C×K     output_layer = "class" (C classes)
//	output.class_bias          C       output_layer = "class"
//
// Rows of the G-wide tensors are gate blocks of H rows each, in this order:
//
//	cell   gates  blocks
//	rnn    1      (single block)
//	gru    3      r, z, n
//	lstm   4      i, f, g, o
//
// This is the layout of PyTorch's nn.RNN, nn.GRU and nn.LSTM (weight_ih_lL,
// weight_hh_lL, same block order), so weights map directly:
//
//	weft                        PyTorch
//	layer.L.input_weight        weight_ih_lL
//	layer.L.recurrent_weight    weight_hh_lL
//	layer.L.bias (rnn, lstm)    bias_ih_lL + bias_hh_lL
//	layer.L.bias (gru)          [b_ir + b_hr, b_iz + b_hz, b_in]
//	layer.L.recurrent_bias      b_hn (the last H entries of bias_hh_lL)
//	output.weight, output.bias  nn.Linear weight, bias
//
// Going the other way, put weft's bias in bias_ih and zeros in bias_hh (for
// GRU: b_hn in the n block of bias_hh). PyTorch has no reset-before GRU
// module. The mapping is tested against PyTorch's own outputs
// (testdata/torch_reference.py), and the reset-before GRU against the same
// equations written out in torch operations there.
//
// # Output layer
//
// The default output layer ("full") is the softmax over all V ids above.
// With output_layer = "class" it is the two-level softmax of Goodman
// (2001), "Classes for fast maximum entropy training": the ids are cut into
// C classes and, with p_t the output layer's input,
//
//	s_t = W_c p_t + b_c                       class scores (output.class_weight, output.class_bias)
//	u_t = W_y[c] p_t + b_y[c]                 word scores over the ids of class c only
//	P(w | h_t) = softmax(s_t)[c(w)] · softmax(u_t)[w]   with c = c(w)
//
// which sums to 1 over the whole vocabulary exactly: no sampled or
// approximate normaliser enters any reported figure. Training and scoring
// compute s_t and u_t for the target's class only: C + |c(w)| scores per
// position instead of V (the positions of a window are grouped by their
// target's class, one matrix product per class); a Stream computes the whole
// distribution. The classes are contiguous ranges of ids, made by
// FrequencyClasses from the training counts (NewModelWithCounts):
// frequency binning as in Mikolov et al. (2011), "Extensions of recurrent
// neural network language model" (from memory: their section 3 assigns
// words to classes by unigram frequency, each class about 1/C of the
// tokens); the vocabulary lists ids by decreasing count, so the first
// classes hold few frequent words, the last many rare ones. Rows
// start(c)…start(c+1)−1 of output.weight and output.bias are class c's, so
// tie_embeddings works unchanged. output_classes = 0 means C = round(√V),
// which minimises C + V/C for classes of equal size. With C = 1 or C = V the
// layer is one softmax (TestClassLimits). BenchmarkOutputLayer (GRU word
// model, E = H = 256, B = 32, T = 35, one thread) measured training windows
// 3.4× faster than the full softmax at V = 10,000 and 5.1–5.5× at
// V = 50,000 when written; at V = 50,000 most of the class model's window
// is the work done once per parameter (clearing the gradients, the clipping
// norm and the update of the V×E and V×K matrices), which the layer does not
// change.
//
// # Initialisation
//
// NewModel draws every parameter from one math/rand/v2 PCG stream seeded
// with the seed argument, tensor by tensor in Params order, row-major.
// Embeddings are U(−init_range, init_range). Input, projection and output
// weights follow init: "uniform" (U(−init_range, init_range)) or "xavier"
// (U(−a, a), a = √(6/(fan_in+fan_out)), Glorot & Bengio 2010, per gate block).
// Recurrent weights follow recurrent_init: "orthogonal" makes each H×H gate
// block orthogonal (Saxe, McClelland & Ganguli 2014) by modified
// Gram–Schmidt on uniform draws. Biases are zero except the LSTM forget
// gate. Only exactly rounded operations are used, with products rounded
// before sums so that no fused multiply-add enters (the arm64 code was
// checked for them): the same seed gives bit-identical weights on every
// platform, which TestInitialisationDigest pins with a frozen digest.
// output.class_weight follows init like output.weight and is drawn after it.
//
// # Training
//
// A Trainer takes windows (Window: B streams × T steps, time-major) and for
// each one runs the forward pass from the carried state, the mean
// cross-entropy over the positions with a target ≥ 0, the backward pass
// with the gradient cut at the window start (truncated BPTT), clipping, one
// optimizer update, and carries the final state into the next window.
// Window.Reset zeroes chosen streams first. With bptt_advance_steps = h′ <
// unroll_steps = h it runs BPTT(h; h′) (Williams & Peng 1990): each window
// brings h′ new tokens, the h−h′ tokens before them are replayed from a kept
// state, gradients flow back h steps and only the new positions are scored.
//
// Clipping: first by global L2 norm, g ← g·c/‖g‖ when ‖g‖ > clip_norm
// (Pascanu, Mikolov & Bengio 2013), then elementwise to ±clip_value. The
// norm before clipping is reported in every StepInfo.
//
// Optimizers (optim.go, each with its update rule in its doc comment): SGD
// with optional momentum or Nesterov momentum (Sutskever et al. 2013),
// AdaGrad (Duchi, Hazan & Singer 2011), RMSprop (Tieleman & Hinton 2012),
// Adam (Kingma & Ba 2015) and AdamW with decoupled weight decay (Loshchilov
// & Hutter 2019). Schedules (schedule.go): constant, step decay, cosine with
// linear warm-up, and divide-on-plateau driven by
// Trainer.ReportValidation.
//
// Exact resume: the model's Params, Trainer.StateTensors (optimizer slots
// "optim.<slot>.<parameter>", carried state "state.layer.L.h" and, for
// LSTM, "state.layer.L.c", plus "…h_end" and "…c_end" under BPTT(h; h′)) and the JSON-able TrainerState (step, tokens,
// generator state, optimizer and schedule scalars, BPTT(h; h′) replay
// tokens) are all a trainer has. Copy them into a fresh trainer of the same
// configs and it continues bit for bit.
//
// # Determinism
//
// For a fixed config, seed and window sequence, training is bit-identical
// run to run and whatever the number of threads: linalg.Gemm splits its
// work over output elements only; elementwise work is split over outputs
// too, each element computed as a loop on one goroutine would; and the one
// reduction split over threads, the squares of the clipping norm, is summed
// in fixed runs of 4096 elements whose partial sums are added in order
// (GlobalNorm), so the split never moves a rounding. Randomness comes only
// from explicitly seeded PCG generators (initialisation and dropout use
// distinct streams). TestCellThreadsBitIdentical and
// TestOptimizerThreadsBitIdentical check this on 1 to 64 threads.
//
// # Threads
//
// A Trainer runs on the threads of its linalg.Pool. What is split, and how
// far:
//
//   - Every matrix product, into one part per 2^19 multiply-adds (about ten
//     microseconds of one core), at most one per thread
//     (linalg.ProductParts). The per-step recurrent product of a small
//     model is small: 32×1024×256 for a 256-wide LSTM at B = 32 pays for 16
//     threads, 32×768×256 (GRU) for 12, so extra threads sit out the
//     recurrence instead of costing it synchronisation. The input, output
//     and weight-gradient products cover all B·T positions of the window
//     and split over any number of threads.
//   - The gate arithmetic of each step, over the B streams, in runs of rows
//     of at least 4096 gate values.
//   - The optimizer update, the clipping norm and the clipping, over the
//     parameters taken as one vector, in runs of 8192 (update) and 32768
//     (scaling, clamping) elements. Serial, the update phase was about a
//     fifth of an 8-thread window of the 256-wide LSTM on a 16-core server
//     (issue 17), capping its speed-up near 5×.
//
// Each thread that packs a product's operands holds a workspace of its
// own, reused across products: training allocates nothing per window on
// any number of threads (TestSteadyStateAllocs at 1, 2, 16, 32 and 64;
// rnn/linalg forces all of a product's parts to hold their buffers at once
// on any machine), and memory grows by one packing workspace per thread
// (MC·KC + KC·NC floats: 2.3 MB with the AVX-512 kernel, 1.2 MB portable).
//
// ChooseThreads is the rule training.threads = 0 stands for: one thread
// per core, but no more than the recurrent step pays for, and never fewer
// than 8 where the machine has 8 cores or more. It is derived from the
// cost of the products, not measured on a many-core machine; `weft bench
// --threads-sweep` measures every setting on the machine at hand. Not done
// yet: running slices of the batch, or the layers of a stack, side by side
// on groups of threads.
//
// # Inference
//
// Model.LogProbs (the eval.LanguageModel method) scores a sequence exactly
// by default, carrying the state through all of it; SetScoring trades
// exactness at piece boundaries for speed (S parallel pieces, each warmed
// by W tokens). The state before the first token is zero, whose
// distribution is softmax(output.bias). A Stream runs n hypotheses one
// token at a time for sampling and beam search (Feed, LogProbs, Select,
// Clone), allocating nothing per token.
//
// A BatchScorer (and LogProbsBatch) scores many sequences side by side,
// each with its own state and length, with LogProbs' numbers bit for bit.
// Every path computes ln softmax(row)[j] as row[j] − linalg.LogSumExp(row):
// float64, maximum first, the exponentials math.Exp's and added in order.
// A batched call also reads the first layer's input pre-activations from a
// table of every token and packs the recurrent weights once; both give the
// bits of the position-by-position products.
//
// # Memory
//
// Training one window of R = B·T positions stores, in scalars (4 bytes each
// in float32; E = 0 for one-hot input, P = 0 without projection):
//
//	2·N                          parameters and gradients (N = NumParams)
//	+ k·N                        optimizer slots: k = 0 SGD, 1 momentum/AdaGrad/RMSprop, 2 Adam(W)
//	+ R·(2E + V + 2P)            embedding rows and their gradient, logits, projection and its gradient
//	+ Σ_l [ 2R·G                 gate activations and their gradient
//	      + (T+1)·B·H·(1+c)      states h (and c for LSTM, c = 1)
//	      + R·H·(1+a)            output gradient, and a = 1 for the GRU/LSTM auxiliary buffer
//	      + R·G·r ]              r = 1 for the reset-after GRU's recurrent-gate gradient
//	+ dropout: R·E + 2·R·H per layer (masks, dropped outputs)
//
// plus a few B×H scratch rows per layer and the matrix kernels' packing
// workspace. The class output layer replaces the R·V logits by
// R·(C + 2K + w) (class scores, grouped input rows and their gradient, word
// scores, w the largest class). At the reference shape (V=96, E=64, H=256, B=32, T=64, one
// LSTM layer, Adam, float32) this is 32.9 MB; TestWindowMemory measures the
// bytes allocated to build the model and trainer and run one window against
// it (39.7 MB, 1.21×, when written; the bound it enforces is 1.5×).
//
// # Checks
//
// The gradients are checked by central finite differences in float64 for
// every tensor of every cell and form, one and two layers, tied and untied,
// one-hot and with dropout, with the class output layer, from a carried
// state (gradcheck_test.go),
// against gorgonia's symbolic gradients of the same graphs
// (gorgonia_test.go; gorgonia is imported by tests only) and against
// PyTorch's forward values and gradients (reference_test.go; the class
// output layer against PyTorch autograd of the same factorisation written
// out in torch operations, reference_class_test.go). Optimizer
// steps are checked against hand computations of their published rules;
// the carried state, resets and the BPTT(h; h′) replay against scoring
// whole sequences (carry_test.go); resuming from exported state against an
// uninterrupted run, bit for bit; and training must beat the unigram and
// bigram models of Moby-Dick and of the demo corpus (learn_test.go).
package rnn
