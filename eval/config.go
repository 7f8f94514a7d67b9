package eval

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
)

// Config is the [evaluation] section of a run file: how often training
// measures itself on the validation split, which baselines are fitted, and
// how the comparison intervals are computed. Every field's comment gives
// its unit, its default and what the zero value means.
type Config struct {
	// EverySteps measures the validation split every this many training
	// steps; it is measured at the end of every epoch and at the end of
	// training too. Zero means only at those ends. Default 500.
	EverySteps int `toml:"every_steps"`

	// EveryMinutes also measures the validation split when this many
	// minutes of wall-clock time have passed since the last measurement.
	// With the plateau schedule or early stopping, whose course depends on
	// the validations, a time cadence makes a run depend on the machine's
	// speed: use EverySteps for those. Zero means no time cadence. Default 0.
	EveryMinutes float64 `toml:"every_minutes"`

	// NgramOrders lists the n-gram orders fitted as baselines, each from 1
	// (unigram) to MaxOrder. The counts are taken once at the largest order
	// and shared by the smaller ones. Empty means no n-gram baselines.
	// Default [1, 2, 3, 4, 5, 6, 8].
	NgramOrders []int `toml:"ngram_orders"`

	// NgramSmoothers lists the smoothing methods tried at every order, by
	// the names of Method.String: "max_likelihood", "add_k",
	// "witten_bell", "absolute", "kneser_ney", "modified_kneser_ney".
	// Empty means no n-gram baselines. Default ["add_k", "witten_bell",
	// "absolute", "kneser_ney", "modified_kneser_ney"].
	NgramSmoothers []string `toml:"ngram_smoothers"`

	// AddK is the pseudo-count k added to every count by the add_k
	// smoother and by the Markov chains (Lidstone; k = 1 is add-one).
	// Must be above 0. Default 1.
	AddK float64 `toml:"add_k"`

	// MarkovOrders lists the context lengths k of the fixed-order Markov
	// chain baselines (k = 0 predicts from token frequencies alone). Empty
	// means none. Default [1, 2].
	MarkovOrders []int `toml:"markov_orders"`

	// HMMStates lists the numbers of hidden states of the hidden Markov
	// model baselines, each at least 2. Empty means none. Default [32].
	HMMStates []int `toml:"hmm_states"`

	// HMMMaxIterations caps the Baum-Welch iterations of each hidden
	// Markov model. At least 1. Default 30.
	HMMMaxIterations int `toml:"hmm_max_iterations"`

	// HMMTolerance stops Baum-Welch when an iteration improves the
	// training log-likelihood by less than this fraction of its magnitude.
	// Zero means run all HMMMaxIterations. Default 1e-4.
	HMMTolerance float64 `toml:"hmm_tolerance"`

	// HMMMaxTokens trains each hidden Markov model on at most this many
	// training tokens (the first ones), since one iteration costs about
	// 8·N² floating-point operations per token. These tokens are held in
	// memory, 8 bytes each, while the models train. Zero means all of them.
	// Default 1000000.
	HMMMaxTokens int `toml:"hmm_max_tokens"`

	// NgramMemory caps the memory of the n-gram counts that the n-gram
	// and Markov chain baselines share, as a size: a number and a unit,
	// "B", "kB", "MB", "GB", "TB" (powers of 1000) or "KiB", "MiB",
	// "GiB", "TiB" (powers of 1024), such as "1GiB" or "500 MB". The counts
	// take about 90 bytes a distinct n-gram on natural text (16 to 32 bytes
	// of hash table and 16 of arrays for each n-gram, 16 to 32 and 45 for
	// each context); when the counts of the whole training split would
	// exceed the cap, they are taken on a seeded subset of it instead
	// (eval.CountNGramsOf: pieces of 1,048,576 tokens in an order drawn
	// from seed, counted until the cap), and every row counted so says how
	// many tokens it counted. At least 1MiB; "0" means no cap.
	// Default "1GiB".
	NgramMemory string `toml:"ngram_memory"`

	// Seed seeds the hidden Markov models' initial parameters, the
	// bootstrap resampling and the pieces of the training split counted
	// under ngram_memory. Zero is a valid seed. Default 1.
	Seed uint64 `toml:"seed"`

	// BootstrapSamples is the number of bootstrap resamples behind each
	// confidence interval. Zero means no intervals. Default 1000.
	BootstrapSamples int `toml:"bootstrap_samples"`

	// BootstrapBlockChars is the length in characters of the contiguous
	// blocks of the held-out text that the bootstrap resamples; a token
	// belongs to the block holding its first character. It should exceed
	// the range over which the models' errors are correlated. At least 1.
	// Default 2000.
	BootstrapBlockChars int `toml:"bootstrap_block_chars"`

	// ConfidenceLevel is the coverage of the bootstrap intervals, above 0
	// and below 1. Default 0.95.
	ConfidenceLevel float64 `toml:"confidence_level"`

	// HeldOutTokens caps the tokens of each held-out split that the
	// comparison (weft eval, the report) and weft baselines score: a longer
	// split is scored on its first HeldOutTokens tokens, in corpus order,
	// and the table says so. The comparison holds about 16 bytes per
	// scored token for each model and baseline (their log-probabilities on
	// the two splits), so this bounds its memory whatever the corpus's
	// size. Zero means whole splits. Default 1000000.
	HeldOutTokens int `toml:"heldout_tokens"`

	// Interpolate adds the row mixing the recurrent model linearly with the
	// best n-gram baseline, the weight tuned on the validation split; false
	// (the zero value) leaves it out. Default true.
	Interpolate bool `toml:"interpolate"`
}

// DefaultConfig returns the defaults documented on Config.
func DefaultConfig() Config {
	return Config{
		EverySteps:          500,
		NgramOrders:         []int{1, 2, 3, 4, 5, 6, 8},
		NgramSmoothers:      []string{"add_k", "witten_bell", "absolute", "kneser_ney", "modified_kneser_ney"},
		AddK:                1,
		MarkovOrders:        []int{1, 2},
		HMMStates:           []int{32},
		HMMMaxIterations:    30,
		HMMTolerance:        1e-4,
		HMMMaxTokens:        1000000,
		NgramMemory:         "1GiB",
		Seed:                1,
		BootstrapSamples:    1000,
		BootstrapBlockChars: 2000,
		ConfidenceLevel:     0.95,
		HeldOutTokens:       1000000,
		Interpolate:         true,
	}
}

// Validate reports every field outside its documented range, each error
// naming its key.
func (c Config) Validate() error {
	var errs []error
	bad := func(key string, format string, args ...any) {
		errs = append(errs, fmt.Errorf("%s: "+format, append([]any{key}, args...)...))
	}
	if c.EveryMinutes < 0 || math.IsNaN(c.EveryMinutes) {
		bad("every_minutes", "%v is not 0 or more", c.EveryMinutes)
	}
	if c.EverySteps < 0 {
		bad("every_steps", "%d is negative", c.EverySteps)
	}
	for _, n := range c.NgramOrders {
		if n < 1 || n > MaxOrder {
			bad("ngram_orders", "order %d outside 1..%d", n, MaxOrder)
		}
	}
	for _, s := range c.NgramSmoothers {
		if _, err := ParseMethod(s); err != nil {
			bad("ngram_smoothers", "%v", err)
		}
	}
	if !(c.AddK > 0) || math.IsInf(c.AddK, 0) {
		bad("add_k", "%g is not a positive number", c.AddK)
	}
	for _, k := range c.MarkovOrders {
		if k < 0 || k >= MaxOrder {
			bad("markov_orders", "context length %d outside 0..%d", k, MaxOrder-1)
		}
	}
	for _, n := range c.HMMStates {
		if n < 2 || n > MaxHMMStates {
			bad("hmm_states", "%d states outside 2..%d", n, MaxHMMStates)
		}
	}
	if c.HMMMaxIterations < 1 {
		bad("hmm_max_iterations", "%d is below 1", c.HMMMaxIterations)
	}
	if !(c.HMMTolerance >= 0) || math.IsInf(c.HMMTolerance, 0) {
		bad("hmm_tolerance", "%g is not a number from 0 up", c.HMMTolerance)
	}
	if c.HMMMaxTokens < 0 {
		bad("hmm_max_tokens", "%d is negative", c.HMMMaxTokens)
	}
	if c.HeldOutTokens < 0 {
		bad("heldout_tokens", "%d is negative", c.HeldOutTokens)
	}
	if m, err := ParseSize(c.NgramMemory); err != nil {
		bad("ngram_memory", "%v", err)
	} else if m > 0 && m < minNgramMemory {
		bad("ngram_memory", "%q is below the least cap, 1MiB (\"0\" means no cap)", c.NgramMemory)
	}
	if c.BootstrapSamples < 0 {
		bad("bootstrap_samples", "%d is negative", c.BootstrapSamples)
	}
	if c.BootstrapBlockChars < 1 {
		bad("bootstrap_block_chars", "%d is below 1", c.BootstrapBlockChars)
	}
	if !(c.ConfidenceLevel > 0 && c.ConfidenceLevel < 1) {
		bad("confidence_level", "%g is not between 0 and 1", c.ConfidenceLevel)
	}
	return errors.Join(errs...)
}

// Methods returns the parsed NgramSmoothers, in order, without repeats.
func (c Config) Methods() ([]Method, error) {
	var ms []Method
	for _, s := range c.NgramSmoothers {
		m, err := ParseMethod(s)
		if err != nil {
			return nil, fmt.Errorf("ngram_smoothers: %w", err)
		}
		if !slices.Contains(ms, m) {
			ms = append(ms, m)
		}
	}
	return ms, nil
}

// Bootstrap returns the bootstrap settings of the config.
func (c Config) Bootstrap() BootstrapConfig {
	return BootstrapConfig{
		Samples:    c.BootstrapSamples,
		BlockChars: c.BootstrapBlockChars,
		Level:      c.ConfidenceLevel,
		Seed:       c.Seed,
	}
}

// minNgramMemory is the least ngram_memory other than 0.
const minNgramMemory = 1 << 20

// NgramMemoryBytes is NgramMemory in bytes, 0 for no cap (and for a value
// Validate refuses).
func (c Config) NgramMemoryBytes() int64 {
	m, err := ParseSize(c.NgramMemory)
	if err != nil {
		return 0
	}
	return m
}

// sizeUnits are the units ParseSize knows, by their exact spelling.
var sizeUnits = map[string]float64{
	"": 1, "B": 1,
	"kB": 1e3, "KB": 1e3, "MB": 1e6, "GB": 1e9, "TB": 1e12,
	"KiB": 1 << 10, "MiB": 1 << 20, "GiB": 1 << 30, "TiB": 1 << 40,
}

// ParseSize reads a size such as "1GiB", "500 MB", "1.5GB" or "0": a
// number from 0 up, optional spaces, and a unit of sizeUnits (none means
// bytes); the result is rounded down to whole bytes.
func ParseSize(s string) (int64, error) {
	t := strings.TrimSpace(s)
	i := strings.IndexFunc(t, func(r rune) bool { return (r < '0' || r > '9') && r != '.' })
	if i < 0 {
		i = len(t)
	}
	num, unit := t[:i], strings.TrimSpace(t[i:])
	mult, ok := sizeUnits[unit]
	v, err := strconv.ParseFloat(num, 64)
	if !ok || err != nil || num == "" {
		return 0, fmt.Errorf("%q is not a size such as \"1GiB\" or \"500MB\"", s)
	}
	b := v * mult
	if b >= math.MaxInt64 {
		return 0, fmt.Errorf("%q is too large", s)
	}
	return int64(b), nil
}
