// Package configs is the schema of weft's run files: one TOML file that
// describes a whole run, in the sections data, model, training, evaluation,
// checkpoint and output. It composes the config structs that the other
// packages own (data.Config, rnn.Config, rnn.TrainConfig, eval.Config), adds
// the run-level settings (budgets, saving cadence, output), decodes strictly
// (an unknown key, a wrong type or an out-of-range value is an error naming
// the file, the line and the key), applies command-line overrides with the
// same checks, and embeds the preset run files stored beside it.
package configs

import (
	"weft/data"
	"weft/eval"
	"weft/rnn"
)

// Run is a whole run file.
type Run struct {
	Data       data.Config `toml:"data"`
	Model      rnn.Config  `toml:"model"`
	Training   Training    `toml:"training"`
	Evaluation Evaluation  `toml:"evaluation"`
	Checkpoint Checkpoint  `toml:"checkpoint"`
	Output     Output      `toml:"output"`
}

// Training is the [training] section: how the model learns (rnn.TrainConfig)
// and the budget that ends the run, whichever limit comes first.
type Training struct {
	rnn.TrainConfig

	// MaxEpochs ends the run after this many passes over the training
	// split. Zero means no epoch budget. Default 0.
	MaxEpochs int `toml:"max_epochs"`

	// MaxTokens ends the run after this many training tokens (summed over
	// all streams). Zero means no token budget. Default 0.
	MaxTokens int64 `toml:"max_tokens"`

	// MaxDuration ends the run after this much wall-clock time spent
	// training in this invocation, as a Go duration ("8h", "90m"). Empty
	// means no time budget; the command-line flags --for and --until set it
	// too. Default "".
	MaxDuration string `toml:"max_duration"`

	// EarlyStopPatience stops the run when the validation loss has not
	// improved for this many evaluations in a row. Zero turns early
	// stopping off. Default 0.
	EarlyStopPatience int `toml:"early_stop_patience"`

	// DivergenceFactor treats a window whose training loss exceeds this
	// multiple of the recent average (of about 50 windows; during the first
	// 20 windows, of ln V, the loss of a uniform prediction over the V
	// vocabulary entries) as a divergence, as is a NaN or an infinite loss
	// or gradient: the run restores the last good checkpoint and lowers the
	// learning rate. Zero checks only NaN and infinity. Default 4.
	DivergenceFactor float64 `toml:"divergence_factor"`

	// DivergenceRetries is how many times in a row the run may recover from
	// a divergence before it gives up with an error. Default 3.
	DivergenceRetries int `toml:"divergence_retries"`

	// DivergenceLRFactor multiplies the learning rate at each recovery from
	// a divergence, from above 0 to below 1. Default 0.5.
	DivergenceLRFactor float64 `toml:"divergence_lr_factor"`

	// WindowVariation shortens training windows at random, as a fraction
	// of unroll_steps from 0 to below 1: a window has between
	// unroll_steps·(1−window_variation) (exclusive) and unroll_steps
	// steps, drawn from training.seed, so that the gradient does not
	// always cut the text at the same places. Zero means every window has
	// unroll_steps steps. It needs bptt_advance_steps = 0. Default 0.
	WindowVariation float64 `toml:"window_variation"`
}

// Evaluation is the [evaluation] section: when the run measures itself on
// the validation split during training (the cadence), and how models are
// compared afterwards (eval.Config).
type Evaluation struct {
	eval.Config
}

// Checkpoint is the [checkpoint] section: when and what the run saves.
type Checkpoint struct {
	// EverySteps saves a checkpoint every this many training steps. Zero
	// means no step cadence. Default 500.
	EverySteps int `toml:"every_steps"`

	// EveryMinutes saves a checkpoint when this many minutes of wall-clock
	// time have passed since the last save. Zero means no time cadence.
	// Default 10.
	EveryMinutes float64 `toml:"every_minutes"`

	// KeepLast is how many periodic checkpoints are kept, newest first; the
	// best-validation checkpoint is kept besides them. At least 1.
	// Default 3.
	KeepLast int `toml:"keep_last"`

	// OnSaveError says what a failed periodic save (a full disk, say) does:
	// "continue" logs it and trains on, keeping the previous checkpoints;
	// "stop" ends the run with an error. Saves at the end of a run always
	// stop on error. Default "continue".
	OnSaveError string `toml:"on_save_error"`
}

// Output is the [output] section: what the run reports and where.
type Output struct {
	// LogEverySeconds is the interval, in seconds, between plain progress
	// lines when standard error is not a terminal (a bar is drawn when it
	// is). Default 30.
	LogEverySeconds float64 `toml:"log_every_seconds"`

	// MetricsEverySteps writes one line to the run's metrics log every this
	// many steps. At least 1. Default 10.
	MetricsEverySteps int `toml:"metrics_every_steps"`

	// Plots draws PNG plots (learning curves, the comparison with the
	// baselines) into the run directory's report folder. Default true.
	Plots bool `toml:"plots"`
}
