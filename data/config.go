package data

import (
	"fmt"
	"math"
	"path/filepath"
	"strings"
)

// Config says where the corpus is and how it is cut into tokens and splits.
// It is the [data] section of a run file. Every field's comment gives its
// unit, its default and what the zero value means.
type Config struct {
	// Files lists the corpus: paths, directories or glob patterns, read in
	// the order given (the files a glob or directory matches are sorted by
	// name). "-" means standard input. Relative paths resolve against the run
	// file's folder. Required.
	Files []string `toml:"files"`

	// Include filters the files found inside a directory listed in files:
	// a file is read when its base name matches one of these glob patterns
	// (path.Match syntax, such as "*.txt"). Directories are walked
	// recursively; names starting with "." are skipped. Files named
	// directly or matched by a glob in files are always read. Empty means
	// every file. Default empty.
	Include []string `toml:"include"`

	// Exclude drops the files found inside a directory whose base name
	// matches one of these glob patterns (such as "*_test.go"), after
	// include has picked them. Empty means none is dropped. Default empty.
	Exclude []string `toml:"exclude"`

	// Tokenizer names how text becomes tokens: "char" (Unicode code
	// points), "byte", "word", "bpe" (byte-pair merges learned on the
	// training split) or "symbols" (whitespace-separated symbols taken as
	// they are). Default "char".
	Tokenizer string `toml:"tokenizer"`

	// Lowercase folds letters to lower case before the "word" and "bpe"
	// tokenizers count or encode them. It is lossy: decoding gives the
	// lower-cased text. Other tokenizers reject it. Default false.
	Lowercase bool `toml:"lowercase"`

	// BPEMerges is the number of byte-pair merges the "bpe" tokenizer
	// learns from the training split; learning stops earlier when no pair
	// occurs twice. Zero means no merges (bpe then equals char on the
	// pieces of the word split). Default 1000.
	BPEMerges int `toml:"bpe_merges"`

	// MinCount is the number of times a token must occur in the training
	// split to get its own vocabulary entry; rarer tokens map to the
	// unknown entry. Zero means 1 (every training token). Default 1.
	MinCount int `toml:"min_count"`

	// MaxVocabulary caps the vocabulary, in entries including the unknown
	// and boundary entries; the most frequent training tokens are kept
	// (ties broken by the token's bytes). Zero means no cap. Default 0.
	MaxVocabulary int `toml:"max_vocabulary"`

	// Boundary adds a reserved boundary entry to the vocabulary: "line"
	// encodes every line end as that entry (it decodes to "\n"), "document"
	// appends it after the tokens of each file (it decodes to nothing).
	// Empty means no boundary entry. Default "".
	Boundary string `toml:"boundary"`

	// ValidationFraction is the share of the corpus, from 0 to 0.5, held
	// out for validation. Default 0.05.
	ValidationFraction float64 `toml:"validation_fraction"`

	// TestFraction is the share of the corpus, from 0 to 0.5, held out for
	// the final test. Default 0.05.
	TestFraction float64 `toml:"test_fraction"`

	// Split says how the corpus is divided: "contiguous" cuts it into three
	// blocks by character count (training first, then validation, then
	// test), "line" or "document" assigns each line or each file to a split
	// by a seeded hash of its position. Default "contiguous".
	Split string `toml:"split"`

	// SplitSeed seeds the hash of the "line" and "document" splits; the
	// same seed gives the same assignment. Zero is a seed like any other.
	// Default 1.
	SplitSeed uint64 `toml:"split_seed"`

	// InvalidUTF8 says what a byte sequence that is not UTF-8 does: "error"
	// stops with the file and byte offset, "replace" substitutes U+FFFD
	// and counts the replacements. Default "error".
	InvalidUTF8 string `toml:"invalid_utf8"`
}

// DefaultConfig returns the defaults documented on Config.
func DefaultConfig() Config {
	return Config{
		Tokenizer:          "char",
		BPEMerges:          1000,
		MinCount:           1,
		ValidationFraction: 0.05,
		TestFraction:       0.05,
		Split:              "contiguous",
		SplitSeed:          1,
		InvalidUTF8:        "error",
	}
}

// Validate reports the first field that is out of range, naming its key.
func (c Config) Validate() error {
	if len(c.Files) == 0 {
		return fmt.Errorf("data.files must list at least one file, directory or glob")
	}
	for _, f := range c.Files {
		if strings.TrimSpace(f) == "" {
			return fmt.Errorf("data.files must not contain an empty path")
		}
		if f != "-" {
			if _, err := filepath.Match(f, ""); err != nil {
				return fmt.Errorf("data.files: bad glob pattern %q", f)
			}
		}
	}
	for _, list := range []struct {
		key  string
		pats []string
	}{{"data.include", c.Include}, {"data.exclude", c.Exclude}} {
		for _, p := range list.pats {
			if _, err := filepath.Match(p, ""); err != nil || p == "" {
				return fmt.Errorf("%s: bad glob pattern %q", list.key, p)
			}
		}
	}
	kind, ok := parseKind(c.Tokenizer)
	if !ok {
		return fmt.Errorf("data.tokenizer must be \"char\", \"byte\", \"word\", \"bpe\" or \"symbols\", got %q", c.Tokenizer)
	}
	if c.Lowercase && kind != KindWord && kind != KindBPE {
		return fmt.Errorf("data.lowercase works only with the \"word\" and \"bpe\" tokenizers, got %q", c.Tokenizer)
	}
	if c.BPEMerges < 0 {
		return fmt.Errorf("data.bpe_merges must not be negative, got %d", c.BPEMerges)
	}
	if c.MinCount < 0 {
		return fmt.Errorf("data.min_count must not be negative, got %d", c.MinCount)
	}
	if c.MaxVocabulary < 0 {
		return fmt.Errorf("data.max_vocabulary must not be negative, got %d", c.MaxVocabulary)
	}
	if c.MaxVocabulary > 0 && c.MaxVocabulary < 2+boolInt(c.Boundary != "") {
		return fmt.Errorf("data.max_vocabulary must leave room for one token beside the reserved entries, got %d", c.MaxVocabulary)
	}
	switch c.Boundary {
	case "", "line", "document":
	default:
		return fmt.Errorf("data.boundary must be \"\", \"line\" or \"document\", got %q", c.Boundary)
	}
	for _, f := range []struct {
		key string
		v   float64
	}{{"data.validation_fraction", c.ValidationFraction}, {"data.test_fraction", c.TestFraction}} {
		if math.IsNaN(f.v) || f.v < 0 || f.v > 0.5 {
			return fmt.Errorf("%s must be from 0 to 0.5, got %v", f.key, f.v)
		}
	}
	switch c.Split {
	case "contiguous", "line", "document":
	default:
		return fmt.Errorf("data.split must be \"contiguous\", \"line\" or \"document\", got %q", c.Split)
	}
	switch c.InvalidUTF8 {
	case "error", "replace":
	default:
		return fmt.Errorf("data.invalid_utf8 must be \"error\" or \"replace\", got %q", c.InvalidUTF8)
	}
	return nil
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}
