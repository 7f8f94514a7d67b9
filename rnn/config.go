package rnn

// Config is the shape of a model: the [model] section of a run file. Every
// field's comment gives its unit, its default and what the zero value means.
type Config struct {
	// Cell is the recurrent cell: "rnn" (Elman), "gru" or "lstm".
	// Default "lstm".
	Cell string `toml:"cell"`

	// Layers is the number of stacked recurrent layers, 1 or more.
	// Default 1.
	Layers int `toml:"layers"`

	// HiddenSize is the width of each layer's state, in units. Default 256.
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
}

// TrainConfig says how a model is trained: the [training] section of a run
// file.
type TrainConfig struct {
	// Optimizer is "sgd", "adagrad", "rmsprop", "adam" or "adamw".
	// Default "adam".
	Optimizer string `toml:"optimizer"`

	// LearningRate is the step size at the start of the schedule.
	// Default 0.002.
	LearningRate float64 `toml:"learning_rate"`

	// BatchSize is the number of parallel streams in a window. Default 32.
	BatchSize int `toml:"batch_size"`

	// UnrollSteps is the number of time steps in a window, over which
	// gradients flow back (truncated BPTT). Default 64.
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
	// one per core. Results do not depend on it. Default 0.
	Threads int `toml:"threads"`
}
