package data

// Config says where the corpus is and how it is cut into tokens and splits.
// It is the [data] section of a run file. Every field's comment gives its
// unit, its default and what the zero value means.
type Config struct {
	// Files lists the corpus: paths, directories or glob patterns, read in
	// the order given (the files a glob or directory matches are sorted by
	// name). "-" means standard input. Relative paths resolve against the run
	// file's folder. Required.
	Files []string `toml:"files"`

	// Tokenizer names how text becomes tokens: "char" (Unicode code
	// points), "byte", "word", "bpe" (byte-pair merges learned on the
	// training split) or "symbols" (whitespace-separated symbols taken as
	// they are). Default "char".
	Tokenizer string `toml:"tokenizer"`

	// ValidationFraction is the share of the corpus, from 0 to 0.5, held
	// out for validation. Default 0.05.
	ValidationFraction float64 `toml:"validation_fraction"`

	// TestFraction is the share of the corpus, from 0 to 0.5, held out for
	// the final test. Default 0.05.
	TestFraction float64 `toml:"test_fraction"`
}

// DefaultConfig returns the defaults documented on Config.
func DefaultConfig() Config {
	return Config{
		Tokenizer:          "char",
		ValidationFraction: 0.05,
		TestFraction:       0.05,
	}
}
