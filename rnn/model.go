package rnn

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync"

	"weft/rnn/linalg"
)

// Float is the element type of a model: float32 for training, float64 for
// the gradient tests. The same code serves both.
type Float = linalg.Float

// Param is one parameter tensor of a model: its stable name (see the package
// documentation for the table), its shape (row-major, outermost first) and
// live views of its values and of the gradient the last backward pass left.
// Writing to Value changes the model; this is how a checkpoint is restored.
type Param[T Float] struct {
	Name  string
	Shape []int
	Value []T
	Grad  []T
}

// Tensor is a named piece of state other than a parameter (optimizer
// moments, carried hidden state), as a live view: read Value to save it,
// write it to restore it.
type Tensor[T Float] struct {
	Name  string
	Shape []int
	Value []T
}

// layerParams are the views of one recurrent layer's parameters and
// gradients.
type layerParams[T Float] struct {
	in, hid, g int // input width, state width, gate width (gates·hid)

	wIn, wRec, bias, bRec     []T // G×in, G×hid, G, hid (bRec: GRU reset_after only)
	gwIn, gwRec, gBias, gbRec []T
}

// Model is a recurrent language model: an embedding (or one-hot input),
// a stack of recurrent layers of one cell type, an optional projection and
// a softmax output layer. Its parameters live in one flat slice. A Model is
// safe for concurrent LogProbs calls and Streams as long as nothing trains
// it or writes its parameters meanwhile.
type Model[T Float] struct {
	cfg   Config
	vocab int
	cell  Cell[T]

	values, grads []T
	params        []Param[T]

	emb, gEmb         []T // V×E, nil for one-hot input
	layers            []layerParams[T]
	proj, gProj       []T // P×H, nil without projection
	outW, gOutW       []T // V×outIn (the embedding when tied)
	outB, gOutB       []T // V
	outIn             int // width of the output layer's input
	pool              *linalg.Pool
	scoreS, scoreWarm int

	// The class-based output layer (output.go); nil for the full softmax.
	classW, gClassW []T     // C×outIn
	classB, gClassB []T     // C
	classStart      []int   // C+1 class boundaries (FrequencyClasses)
	classOf         []int32 // V: class of each id

	scorers sync.Pool // idle *BatchScorer[T] of BatchStreams streams, for LogProbsBatch
}

// NewModel builds a model of the given shape for token ids 0..vocabSize-1
// and initialises its parameters from a PCG generator seeded with seed (see
// "Initialisation" in the package documentation). The same config, vocabulary
// size and seed give bit-identical weights on every machine. A class-based
// output layer gets classes of equal size; NewModelWithCounts makes them
// from the training counts.
func NewModel[T Float](cfg Config, vocabSize int, seed uint64) (*Model[T], error) {
	return newModel[T](cfg, vocabSize, nil, seed)
}

// NewModelWithCounts is NewModel for the vocabulary of len(counts) ids
// whose training counts are counts[id] (data.Vocab.Count). The counts
// matter only to the class-based output layer (output_layer = "class"),
// whose classes FrequencyClasses makes from them; pass the same counts
// (those the checkpoint's vocabulary records) to rebuild a trained model.
func NewModelWithCounts[T Float](cfg Config, counts []int64, seed uint64) (*Model[T], error) {
	if counts == nil {
		counts = []int64{}
	}
	return newModel[T](cfg, len(counts), counts, seed)
}

func newModel[T Float](cfg Config, vocabSize int, counts []int64, seed uint64) (*Model[T], error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if vocabSize < 1 {
		return nil, fmt.Errorf("vocabulary size must be at least 1, got %d", vocabSize)
	}
	if n := paramEstimate(cfg, vocabSize); n > maxElements {
		return nil, fmt.Errorf("model of %.3g parameters is larger than the limit of %.3g (check model.hidden_size, model.layers and the vocabulary size)", n, float64(maxElements))
	}
	if cfg.Activation == "" {
		cfg.Activation = "tanh"
	}
	if cfg.GRUForm == "" {
		cfg.GRUForm = "reset_after"
	}
	if cfg.RecurrentInit == "" {
		cfg.RecurrentInit = cfg.Init
	}
	if cfg.OutputLayer == "" {
		cfg.OutputLayer = "full"
	}
	m := &Model[T]{cfg: cfg, vocab: vocabSize, cell: newCell[T](cfg), outIn: cfg.outputInput(), scoreS: 1}
	if cfg.OutputLayer == "class" {
		if err := m.setClasses(counts); err != nil {
			return nil, err
		}
	}
	m.build()
	m.initialise(seed)
	return m, nil
}

// maxElements bounds every buffer weft allocates (2^34 elements, 64 GiB of
// float32), so that an absurd config is an error, not a crash.
const maxElements = 1 << 34

// paramEstimate is the parameter count of cfg, in float64 so that it
// cannot overflow.
func paramEstimate(cfg Config, vocab int) float64 {
	V, E, H := float64(vocab), float64(cfg.EmbeddingSize), float64(cfg.HiddenSize)
	G := 4 * H
	in := E
	if in == 0 {
		in = V
	}
	n := V*E + G*(in+H+2) + float64(cfg.Layers-1)*G*(2*H+2) + float64(cfg.ProjectionSize)*H + V*(float64(cfg.outputInput())+1)
	if cfg.OutputLayer == "class" {
		n += float64(cfg.classCount(vocab)) * (float64(cfg.outputInput()) + 1)
	}
	return n
}

func newCell[T Float](cfg Config) Cell[T] {
	switch cfg.Cell {
	case "rnn":
		return &vanillaCell[T]{relu: cfg.Activation == "relu"}
	case "gru":
		return &gruCell[T]{resetAfter: cfg.GRUForm != "reset_before"}
	default:
		return &lstmCell[T]{}
	}
}

// build lays out every tensor in the flat slices, in the documented order.
func (m *Model[T]) build() {
	c, V, H := m.cfg, m.vocab, m.cfg.HiddenSize
	G := m.cell.Gates() * H
	type spec struct {
		name  string
		shape []int
		val   *[]T
		grad  *[]T
	}
	var specs []spec
	add := func(name string, val, grad *[]T, shape ...int) {
		specs = append(specs, spec{name, shape, val, grad})
	}
	if c.EmbeddingSize > 0 {
		add("embedding.weight", &m.emb, &m.gEmb, V, c.EmbeddingSize)
	}
	m.layers = make([]layerParams[T], c.Layers)
	for l := range m.layers {
		lp := &m.layers[l]
		lp.in, lp.hid, lp.g = H, H, G
		if l == 0 {
			lp.in = c.EmbeddingSize
			if lp.in == 0 {
				lp.in = V
			}
		}
		p := fmt.Sprintf("layer.%d.", l)
		add(p+"input_weight", &lp.wIn, &lp.gwIn, G, lp.in)
		add(p+"recurrent_weight", &lp.wRec, &lp.gwRec, G, H)
		add(p+"bias", &lp.bias, &lp.gBias, G)
		if m.cell.hasRecurrentBias() {
			add(p+"recurrent_bias", &lp.bRec, &lp.gbRec, H)
		}
	}
	if c.ProjectionSize > 0 {
		add("projection.weight", &m.proj, &m.gProj, c.ProjectionSize, H)
	}
	if !c.TieEmbeddings {
		add("output.weight", &m.outW, &m.gOutW, V, m.outIn)
	}
	add("output.bias", &m.outB, &m.gOutB, V)
	if m.classStart != nil {
		C := len(m.classStart) - 1
		add("output.class_weight", &m.classW, &m.gClassW, C, m.outIn)
		add("output.class_bias", &m.classB, &m.gClassB, C)
	}

	total := 0
	for _, s := range specs {
		total += size(s.shape)
	}
	m.values = make([]T, total)
	m.grads = make([]T, total)
	off := 0
	for _, s := range specs {
		n := size(s.shape)
		*s.val = m.values[off : off+n : off+n]
		*s.grad = m.grads[off : off+n : off+n]
		m.params = append(m.params, Param[T]{Name: s.name, Shape: s.shape, Value: *s.val, Grad: *s.grad})
		off += n
	}
	if c.TieEmbeddings {
		m.outW, m.gOutW = m.emb, m.gEmb
	}
}

func size(shape []int) int {
	n := 1
	for _, d := range shape {
		n *= d
	}
	return n
}

// initialise fills the parameters, tensor by tensor in Params order, from
// one PCG stream. Only integer arithmetic, +, −, ×, ÷ and √ (all exactly
// rounded in IEEE 754) are used, and products are rounded before they are
// added, so no fused multiply-add can change a bit between platforms.
func (m *Model[T]) initialise(seed uint64) {
	rng := rand.New(rand.NewPCG(seed, initStream))
	c := m.cfg
	uniform := func(dst []T, a float64) {
		for i := range dst {
			dst[i] = T(float64(a*twoU(rng)) - a)
		}
	}
	xavier := func(dst []T, fanIn, fanOut int) {
		uniform(dst, math.Sqrt(6/float64(fanIn+fanOut)))
	}
	scheme := func(s string, dst []T, rows, cols int) {
		if s == "uniform" {
			uniform(dst, c.InitRange)
		} else {
			xavier(dst, cols, rows)
		}
	}
	if m.emb != nil {
		uniform(m.emb, c.InitRange)
	}
	for l := range m.layers {
		lp := &m.layers[l]
		H := lp.hid
		gates := lp.g / H
		// Fan-in and fan-out per gate block: each gate is its own map.
		for k := 0; k < gates; k++ {
			scheme(c.Init, lp.wIn[k*H*lp.in:(k+1)*H*lp.in], H, lp.in)
		}
		for k := 0; k < gates; k++ {
			blk := lp.wRec[k*H*H : (k+1)*H*H]
			if c.RecurrentInit == "orthogonal" {
				orthogonal(blk, H, rng)
			} else {
				scheme(c.RecurrentInit, blk, H, H)
			}
		}
		clear(lp.bias)
		m.cell.initBias(lp.bias, H, c.ForgetBias)
		clear(lp.bRec)
	}
	if m.proj != nil {
		scheme(c.Init, m.proj, c.ProjectionSize, c.HiddenSize)
	}
	if !c.TieEmbeddings {
		scheme(c.Init, m.outW, m.vocab, m.outIn)
	}
	clear(m.outB)
	if m.classW != nil {
		scheme(c.Init, m.classW, len(m.classB), m.outIn)
		clear(m.classB)
	}
}

// twoU returns 2u for u uniform on [0, 1), exactly 2·rng.Float64(): the
// low 53 bits of one draw over 2^52. Written out so that the compiler has
// no product to fuse with a following addition. (Fusing an exact product
// would give the same bits anyway; this keeps the initialisation free of
// fused multiply-adds on arm64, as checked with -gcflags=-S.)
func twoU(rng *rand.Rand) float64 {
	return float64(rng.Uint64()<<11>>11) / (1 << 52)
}

// twoUMinus1 returns exactly 2·rng.Float64() − 1, the subtraction done on
// integers.
func twoUMinus1(rng *rand.Rand) float64 {
	return float64(int64(rng.Uint64()<<11>>11)-1<<52) / (1 << 52)
}

// initStream is the PCG stream constant of weight initialisation; the
// trainer's dropout generator uses trainStream, so the two never overlap.
const (
	initStream  = 0x77656674_696e6974 // "weftinit"
	trainStream = 0x77656674_74726e21 // "wefttrn!"
)

// orthogonal fills the n×n row-major dst with an orthogonal matrix: modified
// Gram–Schmidt (Golub & Van Loan, Matrix Computations, §5.2.8) on the rows of
// a matrix of U(−1, 1) draws, in float64. A row that comes out (numerically)
// dependent is redrawn.
func orthogonal[T Float](dst []T, n int, rng *rand.Rand) {
	q := make([]float64, n*n)
	for i := 0; i < n; i++ {
		row := q[i*n : (i+1)*n]
		for {
			for j := range row {
				row[j] = twoUMinus1(rng)
			}
			for k := 0; k < i; k++ {
				prev := q[k*n : (k+1)*n]
				var d float64
				for j := range row {
					d += float64(row[j] * prev[j])
				}
				for j := range row {
					row[j] -= float64(d * prev[j])
				}
			}
			var ss float64
			for _, v := range row {
				ss += float64(v * v)
			}
			norm := math.Sqrt(ss)
			if norm > 1e-6 {
				for j := range row {
					row[j] /= norm
				}
				break
			}
		}
	}
	for i, v := range q {
		dst[i] = T(v)
	}
}

// Params lists the parameter tensors in their stable order (see the package
// documentation). The views are live: they alias the model's storage.
func (m *Model[T]) Params() []Param[T] { return m.params }

// Cell returns the model's cell (the same for every layer).
func (m *Model[T]) Cell() Cell[T] { return m.cell }

// Config returns the model's resolved config (empty keys filled in).
func (m *Model[T]) Config() Config { return m.cfg }

// VocabSize is the number of token ids the model reads and predicts.
func (m *Model[T]) VocabSize() int { return m.vocab }

// Name is a short label such as "lstm-1x256".
func (m *Model[T]) Name() string {
	return fmt.Sprintf("%s-%dx%d", m.cell.Name(), m.cfg.Layers, m.cfg.HiddenSize)
}

// NumParams is the number of scalar parameters (a tied matrix counts once).
func (m *Model[T]) NumParams() int { return len(m.values) }

// SetPool sets the thread pool of LogProbs and of the Streams made after
// the call; nil (the default) runs on the caller. Results do not depend on
// it.
func (m *Model[T]) SetPool(p *linalg.Pool) { m.pool = p }

// ZeroGrad clears every gradient.
func (m *Model[T]) ZeroGrad() { clear(m.grads) }
