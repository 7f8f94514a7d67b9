package rnn

import (
	"errors"
	"fmt"
	"math"
)

// Config is the shape of a model: the [model] section of a run file. Every
// field's comment gives its unit, its default and what the zero value means.
type Config struct {
	// Cell is the recurrent cell: "rnn" (Elman), "gru" or "lstm".
	// Empty is invalid. Default "lstm".
	Cell string `toml:"cell"`

	// Layers is the number of stacked recurrent layers, 1 or more (zero
	// is invalid). Default 1.
	Layers int `toml:"layers"`

	// HiddenSize is the width of each layer's state, in units, 1 or more
	// (zero is invalid). Default 256.
	HiddenSize int `toml:"hidden_size"`

	// EmbeddingSize is the width of the token embedding, in units. Zero
	// means one-hot input (sensible only for small vocabularies).
	// Default 64.
	EmbeddingSize int `toml:"embedding_size"`

	// Dropout is the probability, from 0 to below 1, of dropping a unit on
	// the non-recurrent connections during training (Zaremba, Sutskever &
	// Vinyals 2014). Zero turns it off; it is always off at evaluation.
	// Default 0.
	Dropout float64 `toml:"dropout"`

	// Activation is the nonlinearity of the "rnn" cell: "tanh" or "relu".
	// Other cells ignore it. Empty means "tanh". Default "tanh".
	Activation string `toml:"activation"`

	// GRUForm says where the "gru" cell applies its reset gate:
	// "reset_after" multiplies the reset gate into the recurrent product,
	// n = tanh(W_n x + b_n + r ⊙ (U_n h + b_hn)), the form general
	// frameworks use; "reset_before" multiplies it into the state before the
	// product, n = tanh(W_n x + b_n + U_n (r ⊙ h)), the form of Cho et al.
	// (2014). Other cells ignore it. Empty means "reset_after".
	// Default "reset_after".
	GRUForm string `toml:"gru_form"`

	// ProjectionSize is the width, in units, of a linear projection (no
	// bias) between the last recurrent layer and the output layer. Zero
	// means no projection. Default 0.
	ProjectionSize int `toml:"projection_size"`

	// TieEmbeddings makes the output layer reuse the embedding matrix as its
	// weights (Press & Wolf 2017). It needs embedding_size > 0 and the
	// output layer's input (projection_size when set, else hidden_size) to
	// equal embedding_size. Default false.
	TieEmbeddings bool `toml:"tie_embeddings"`

	// Init is the scheme for the input and output weights: "uniform" draws
	// from U(−init_range, init_range); "xavier" draws from U(−a, a) with
	// a = √(6/(fan_in+fan_out)) (Glorot & Bengio 2010). Empty is invalid.
	// Default "xavier".
	Init string `toml:"init"`

	// InitRange is the half-width of the uniform draws of the "uniform"
	// scheme and of the embedding matrix, which every scheme draws from
	// U(−init_range, init_range). It must be positive (zero is invalid).
	// Default 0.1.
	InitRange float64 `toml:"init_range"`

	// RecurrentInit is the scheme for the recurrent weights: "orthogonal"
	// makes each gate's H×H block an orthogonal matrix (Saxe, McClelland &
	// Ganguli 2014), or "uniform" or "xavier" as for Init. Empty means the
	// same as init. Default "orthogonal".
	RecurrentInit string `toml:"recurrent_init"`

	// ForgetBias is the initial bias of the LSTM forget gate (Gers,
	// Schmidhuber & Cummins 2000 recommend a positive one). Zero means a zero
	// bias like every other gate. Other cells ignore it. Default 1.
	ForgetBias float64 `toml:"forget_bias"`

	// OutputLayer is the output layer: "full" is one softmax over the whole
	// vocabulary; "class" is the two-level softmax of Goodman (2001), a
	// softmax over output_classes classes of token ids times a softmax over
	// the ids of the target's class, exactly normalised, at a training cost
	// per position of about C + V/C scores instead of V (worth it for word
	// vocabularies of thousands). Empty means "full". Default "full".
	OutputLayer string `toml:"output_layer"`

	// OutputClasses is the number of classes C of the "class" output layer,
	// from 1 to the vocabulary size; the classes are ranges of ids of about
	// equal training frequency (frequency binning, Mikolov et al. 2011).
	// Zero means the nearest integer to √V. It must be zero with the "full"
	// layer. Default 0.
	OutputClasses int `toml:"output_classes"`
}

// DefaultConfig returns the defaults documented on Config.
func DefaultConfig() Config {
	return Config{
		Cell:          "lstm",
		Layers:        1,
		HiddenSize:    256,
		EmbeddingSize: 64,
		Activation:    "tanh",
		GRUForm:       "reset_after",
		Init:          "xavier",
		InitRange:     0.1,
		RecurrentInit: "orthogonal",
		ForgetBias:    1,
		OutputLayer:   "full",
	}
}

// Validate reports the first key of c that is out of range, naming it as
// it is spelled in a run file.
func (c Config) Validate() error {
	switch c.Cell {
	case "rnn", "gru", "lstm":
	default:
		return fmt.Errorf("model.cell must be \"rnn\", \"gru\" or \"lstm\", got %q", c.Cell)
	}
	if c.Layers < 1 {
		return fmt.Errorf("model.layers must be at least 1, got %d", c.Layers)
	}
	if c.HiddenSize < 1 {
		return fmt.Errorf("model.hidden_size must be at least 1, got %d", c.HiddenSize)
	}
	if c.EmbeddingSize < 0 {
		return fmt.Errorf("model.embedding_size must be 0 (one-hot) or more, got %d", c.EmbeddingSize)
	}
	if !(c.Dropout >= 0 && c.Dropout < 1) {
		return fmt.Errorf("model.dropout must be in [0, 1), got %v", c.Dropout)
	}
	switch c.Activation {
	case "", "tanh", "relu":
	default:
		return fmt.Errorf("model.activation must be \"tanh\" or \"relu\", got %q", c.Activation)
	}
	switch c.GRUForm {
	case "", "reset_after", "reset_before":
	default:
		return fmt.Errorf("model.gru_form must be \"reset_after\" or \"reset_before\", got %q", c.GRUForm)
	}
	if c.ProjectionSize < 0 {
		return fmt.Errorf("model.projection_size must be 0 (none) or more, got %d", c.ProjectionSize)
	}
	if c.TieEmbeddings {
		if c.EmbeddingSize == 0 {
			return fmt.Errorf("model.tie_embeddings needs model.embedding_size > 0 (one-hot input has no embedding to tie)")
		}
		if out := c.outputInput(); out != c.EmbeddingSize {
			if c.ProjectionSize > 0 {
				return fmt.Errorf("model.tie_embeddings needs model.projection_size (%d) to equal model.embedding_size (%d)", c.ProjectionSize, c.EmbeddingSize)
			}
			return fmt.Errorf("model.tie_embeddings needs model.hidden_size (%d) to equal model.embedding_size (%d); set model.projection_size = %d to tie them", c.HiddenSize, c.EmbeddingSize, c.EmbeddingSize)
		}
	}
	switch c.Init {
	case "uniform", "xavier":
	default:
		return fmt.Errorf("model.init must be \"uniform\" or \"xavier\", got %q", c.Init)
	}
	switch c.RecurrentInit {
	case "", "uniform", "xavier", "orthogonal":
	default:
		return fmt.Errorf("model.recurrent_init must be \"orthogonal\", \"uniform\" or \"xavier\", got %q", c.RecurrentInit)
	}
	if !(c.InitRange > 0) || math.IsInf(c.InitRange, 0) {
		return fmt.Errorf("model.init_range must be a positive number, got %v", c.InitRange)
	}
	if math.IsNaN(c.ForgetBias) || math.IsInf(c.ForgetBias, 0) {
		return fmt.Errorf("model.forget_bias must be a finite number, got %v", c.ForgetBias)
	}
	switch c.OutputLayer {
	case "", "full", "class":
	default:
		return fmt.Errorf("model.output_layer must be \"full\" or \"class\", got %q", c.OutputLayer)
	}
	if c.OutputClasses < 0 {
		return fmt.Errorf("model.output_classes must be 0 (about √V) or more, got %d", c.OutputClasses)
	}
	if c.OutputClasses > 0 && c.OutputLayer != "class" {
		return fmt.Errorf("model.output_classes (%d) needs model.output_layer = \"class\"", c.OutputClasses)
	}
	return nil
}

// outputInput is the width of the output layer's input.
func (c Config) outputInput() int {
	if c.ProjectionSize > 0 {
		return c.ProjectionSize
	}
	return c.HiddenSize
}

// TrainConfig says how a model is trained: the [training] section of a run
// file.
type TrainConfig struct {
	// Optimizer is "sgd", "adagrad", "rmsprop", "adam" or "adamw".
	// Empty is invalid. Default "adam".
	Optimizer string `toml:"optimizer"`

	// LearningRate is the step size at the start of the schedule; it must
	// be positive (zero is invalid). Default 0.002.
	LearningRate float64 `toml:"learning_rate"`

	// BatchSize is the number of parallel streams in a window, 1 or more
	// (zero is invalid). Default 32.
	BatchSize int `toml:"batch_size"`

	// UnrollSteps is the number of time steps in a window, over which
	// gradients flow back (truncated BPTT); windows may be shorter. 1 or
	// more (zero is invalid). Default 64.
	UnrollSteps int `toml:"unroll_steps"`

	// ClipNorm is the largest global L2 norm of the gradient; a larger one is
	// scaled down to it (Pascanu, Mikolov & Bengio 2013). Zero turns
	// clipping by norm off. Default 5.
	ClipNorm float64 `toml:"clip_norm"`

	// Seed seeds every random choice of the run: initial weights, dropout
	// masks, window-length variation. Default 1.
	Seed uint64 `toml:"seed"`

	// MaxSteps is the training budget in windows (optimizer steps). Zero
	// means no step budget. Default 0.
	MaxSteps int `toml:"max_steps"`

	// Threads is the number of threads for the matrix kernels. Zero means
	// as many as the model's products pay for on this machine's cores
	// (ChooseThreads: never fewer than min(8, cores)). Results do not
	// depend on it. Default 0.
	Threads int `toml:"threads"`

	// BPTTAdvanceSteps is h′ of the BPTT(h; h′) scheme of Williams & Peng
	// (1990), in time steps: each update reads h′ new tokens per stream
	// (the windows from the batches must then have T = h′) and gradients
	// flow back over unroll_steps = h steps, the h−h′ earlier tokens being
	// replayed from a kept copy of the state. Only the h′ new positions add
	// to the loss. Zero means h′ = h: plain truncated BPTT, where windows
	// may have any T up to unroll_steps. Default 0.
	BPTTAdvanceSteps int `toml:"bptt_advance_steps"`

	// ClipValue is the largest magnitude of a single gradient element; each
	// element is clamped to [−clip_value, clip_value] after clipping by
	// norm. Zero turns it off. Default 0.
	ClipValue float64 `toml:"clip_value"`

	// Momentum is the momentum coefficient μ of "sgd", from 0 to below 1.
	// Zero means plain SGD. Default 0.
	Momentum float64 `toml:"momentum"`

	// Nesterov makes "sgd" momentum look ahead (Sutskever et al. 2013).
	// It needs momentum > 0. Default false.
	Nesterov bool `toml:"nesterov"`

	// WeightDecay is the L2 coefficient λ applied to every parameter: added
	// to the gradient (λθ) for "sgd", "adagrad", "rmsprop" and "adam";
	// decoupled from it for "adamw" (Loshchilov & Hutter 2019). Zero turns
	// it off. Default 0 (0.01 is common for "adamw").
	WeightDecay float64 `toml:"weight_decay"`

	// Beta1 is the decay of Adam's first-moment average, from 0 to below 1
	// (Kingma & Ba 2015). Zero means no averaging (m = g). Default 0.9.
	Beta1 float64 `toml:"beta1"`

	// Beta2 is the decay of Adam's second-moment average, from 0 to below 1.
	// Zero means no averaging (v = g²). Default 0.999.
	Beta2 float64 `toml:"beta2"`

	// RMSDecay is the decay ρ of the squared-gradient average of "rmsprop",
	// from 0 to below 1. Zero means no averaging (s = g²). Default 0.99.
	RMSDecay float64 `toml:"rms_decay"`

	// Epsilon is the small positive constant added to the denominator of
	// "adagrad", "rmsprop", "adam" and "adamw"; zero is invalid.
	// Default 1e-8.
	Epsilon float64 `toml:"epsilon"`

	// Schedule shapes the learning rate over steps: "constant", "step"
	// (multiply by decay_factor every decay_every_steps), "cosine" (linear
	// warm-up over warmup_steps, then a half cosine down to
	// min_learning_rate at cosine_steps), "linear" (the same warm-up, then
	// a straight line down to min_learning_rate at linear_steps) or
	// "plateau" (divide by plateau_divisor when the validation loss stops
	// improving). With a time budget and no step budget, "cosine" and
	// "linear" without their length anneal to the deadline: the run plans
	// the length from its measured speed. Empty is invalid. Default
	// "constant".
	Schedule string `toml:"schedule"`

	// DecayEverySteps is the period of the "step" schedule, in steps; zero
	// is invalid with that schedule. Default 1000.
	DecayEverySteps int `toml:"decay_every_steps"`

	// DecayFactor multiplies the rate at each "step" decay, from above 0 to
	// 1; zero is invalid with that schedule. Default 0.5.
	DecayFactor float64 `toml:"decay_factor"`

	// WarmupSteps is the length of the linear warm-up of the "cosine" and
	// "linear" schedules, in steps. Zero means no warm-up. Default 0.
	WarmupSteps int `toml:"warmup_steps"`

	// CosineSteps is the step at which the "cosine" schedule reaches
	// min_learning_rate (and stays). Zero means max_steps, or with a time
	// budget and no max_steps the step planned from the deadline.
	// Default 0.
	CosineSteps int `toml:"cosine_steps"`

	// MinLearningRate is the floor of the "cosine" and "linear" schedules.
	// Zero means the rate decays to 0. Default 0.
	MinLearningRate float64 `toml:"min_learning_rate"`

	// PlateauDivisor divides the rate of the "plateau" schedule each time
	// the validation loss stops improving; more than 1 (zero is invalid
	// with that schedule). Default 2.
	PlateauDivisor float64 `toml:"plateau_divisor"`

	// PlateauPatience is the number of validations without improvement the
	// "plateau" schedule tolerates before it divides. Zero means it divides
	// at the first one. Default 0.
	PlateauPatience int `toml:"plateau_patience"`

	// LinearSteps is the step at which the "linear" schedule reaches
	// min_learning_rate (and stays). Zero means max_steps, or with a time
	// budget and no max_steps the step planned from the deadline.
	// Default 0.
	LinearSteps int `toml:"linear_steps"`

	// PlateauThreshold is the relative improvement, from 0 to below 1, a
	// validation loss needs over the best so far to count as one for
	// "plateau". Zero means any decrease counts. Default 0.
	PlateauThreshold float64 `toml:"plateau_threshold"`
}

// DefaultTrainConfig returns the defaults documented on TrainConfig.
func DefaultTrainConfig() TrainConfig {
	return TrainConfig{
		Optimizer:       "adam",
		LearningRate:    0.002,
		BatchSize:       32,
		UnrollSteps:     64,
		ClipNorm:        5,
		Seed:            1,
		Beta1:           0.9,
		Beta2:           0.999,
		RMSDecay:        0.99,
		Epsilon:         1e-8,
		Schedule:        "constant",
		DecayEverySteps: 1000,
		DecayFactor:     0.5,
		PlateauDivisor:  2,
	}
}

// Validate reports the first key of c that is out of range, naming it as
// it is spelled in a run file.
func (c TrainConfig) Validate() error {
	fin := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	unit := func(v float64) bool { return v >= 0 && v < 1 }
	switch c.Optimizer {
	case "sgd", "adagrad", "rmsprop", "adam", "adamw":
	default:
		return fmt.Errorf("training.optimizer must be \"sgd\", \"adagrad\", \"rmsprop\", \"adam\" or \"adamw\", got %q", c.Optimizer)
	}
	if !(c.LearningRate > 0) || !fin(c.LearningRate) {
		return fmt.Errorf("training.learning_rate must be a positive number, got %v", c.LearningRate)
	}
	if c.BatchSize < 1 {
		return fmt.Errorf("training.batch_size must be at least 1, got %d", c.BatchSize)
	}
	if c.UnrollSteps < 1 {
		return fmt.Errorf("training.unroll_steps must be at least 1, got %d", c.UnrollSteps)
	}
	if !(c.ClipNorm >= 0) || !fin(c.ClipNorm) {
		return fmt.Errorf("training.clip_norm must be 0 (off) or a positive number, got %v", c.ClipNorm)
	}
	if c.MaxSteps < 0 {
		return fmt.Errorf("training.max_steps must be 0 (no budget) or more, got %d", c.MaxSteps)
	}
	if c.Threads < 0 {
		return fmt.Errorf("training.threads must be 0 (one per core) or more, got %d", c.Threads)
	}
	if c.BPTTAdvanceSteps < 0 || c.BPTTAdvanceSteps > c.UnrollSteps {
		return fmt.Errorf("training.bptt_advance_steps must be from 0 to training.unroll_steps (%d), got %d", c.UnrollSteps, c.BPTTAdvanceSteps)
	}
	if !(c.ClipValue >= 0) || !fin(c.ClipValue) {
		return fmt.Errorf("training.clip_value must be 0 (off) or a positive number, got %v", c.ClipValue)
	}
	if !unit(c.Momentum) {
		return fmt.Errorf("training.momentum must be in [0, 1), got %v", c.Momentum)
	}
	if c.Nesterov && c.Momentum == 0 {
		return fmt.Errorf("training.nesterov needs training.momentum > 0")
	}
	if !(c.WeightDecay >= 0) || !fin(c.WeightDecay) {
		return fmt.Errorf("training.weight_decay must be 0 (off) or a positive number, got %v", c.WeightDecay)
	}
	if !unit(c.Beta1) {
		return fmt.Errorf("training.beta1 must be in [0, 1), got %v", c.Beta1)
	}
	if !unit(c.Beta2) {
		return fmt.Errorf("training.beta2 must be in [0, 1), got %v", c.Beta2)
	}
	if !unit(c.RMSDecay) {
		return fmt.Errorf("training.rms_decay must be in [0, 1), got %v", c.RMSDecay)
	}
	if !(c.Epsilon > 0) || !fin(c.Epsilon) {
		return fmt.Errorf("training.epsilon must be a positive number, got %v", c.Epsilon)
	}
	switch c.Schedule {
	case "constant":
	case "step":
		if c.DecayEverySteps < 1 {
			return fmt.Errorf("training.decay_every_steps must be at least 1, got %d", c.DecayEverySteps)
		}
		if !(c.DecayFactor > 0 && c.DecayFactor <= 1) {
			return fmt.Errorf("training.decay_factor must be in (0, 1], got %v", c.DecayFactor)
		}
	case "cosine", "linear":
		if c.WarmupSteps < 0 {
			return fmt.Errorf("training.warmup_steps must be 0 or more, got %d", c.WarmupSteps)
		}
		if c.CosineSteps < 0 {
			return fmt.Errorf("training.cosine_steps must be 0 (max_steps) or more, got %d", c.CosineSteps)
		}
		if c.LinearSteps < 0 {
			return fmt.Errorf("training.linear_steps must be 0 (max_steps) or more, got %d", c.LinearSteps)
		}
		if !(c.MinLearningRate >= 0 && c.MinLearningRate <= c.LearningRate) {
			return fmt.Errorf("training.min_learning_rate must be from 0 to training.learning_rate (%v), got %v", c.LearningRate, c.MinLearningRate)
		}
		if c.DecaySteps() == 0 {
			return noLengthError(fmt.Sprintf("training.schedule %q needs training.%s_steps, training.max_steps or a time budget (--for, --until, training.max_duration)",
				c.Schedule, c.Schedule))
		}
		if c.DecaySteps() <= c.WarmupSteps {
			return fmt.Errorf("training.warmup_steps (%d) must be below the %s length (%d)", c.WarmupSteps, c.Schedule, c.DecaySteps())
		}
	case "plateau":
		if !(c.PlateauDivisor > 1) || !fin(c.PlateauDivisor) {
			return fmt.Errorf("training.plateau_divisor must be a number above 1, got %v", c.PlateauDivisor)
		}
		if c.PlateauPatience < 0 {
			return fmt.Errorf("training.plateau_patience must be 0 or more, got %d", c.PlateauPatience)
		}
		if !unit(c.PlateauThreshold) {
			return fmt.Errorf("training.plateau_threshold must be in [0, 1), got %v", c.PlateauThreshold)
		}
	default:
		return fmt.Errorf("training.schedule must be \"constant\", \"step\", \"cosine\", \"linear\" or \"plateau\", got %q", c.Schedule)
	}
	return nil
}

// ErrNoDecayLength is wrapped by Validate's error when a "cosine" or
// "linear" schedule has no length: neither its own key nor max_steps. A run
// with a time budget supplies the length from its plan (see
// WithDecaySteps), so the run-file check lets this one error pass.
var ErrNoDecayLength = errors.New("schedule length unknown")

// noLengthError is Validate's error for a missing schedule length; it is
// ErrNoDecayLength for errors.Is.
type noLengthError string

func (e noLengthError) Error() string        { return string(e) }
func (e noLengthError) Is(target error) bool { return target == ErrNoDecayLength }

// Anneals reports whether the schedule decays to a floor over a length
// (the "cosine" and "linear" schedules).
func (c TrainConfig) Anneals() bool { return c.Schedule == "cosine" || c.Schedule == "linear" }

// DecaySteps is the step at which an annealing schedule reaches its floor:
// its own length key (cosine_steps or linear_steps), else max_steps; 0
// when neither is set or the schedule does not anneal.
func (c TrainConfig) DecaySteps() int {
	own := 0
	switch c.Schedule {
	case "cosine":
		own = c.CosineSteps
	case "linear":
		own = c.LinearSteps
	default:
		return 0
	}
	if own > 0 {
		return own
	}
	return c.MaxSteps
}

// OwnDecaySteps reports whether the schedule's length comes from its own
// key (cosine_steps or linear_steps) rather than from max_steps or a plan.
func (c TrainConfig) OwnDecaySteps() bool {
	return (c.Schedule == "cosine" && c.CosineSteps > 0) || (c.Schedule == "linear" && c.LinearSteps > 0)
}

// WithDecaySteps returns c with the annealing schedule's length set to
// steps (the key of its own schedule), as a run planned from its deadline
// does; other schedules are returned unchanged.
func (c TrainConfig) WithDecaySteps(steps int) TrainConfig {
	switch c.Schedule {
	case "cosine":
		c.CosineSteps = steps
	case "linear":
		c.LinearSteps = steps
	}
	return c
}
