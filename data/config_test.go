package data

import (
	"strings"
	"testing"
)

func TestConfigValidate(t *testing.T) {
	good := DefaultConfig()
	good.Files = []string{"corpus.txt"}
	if err := good.Validate(); err != nil {
		t.Fatalf("defaults with a file: %v", err)
	}
	tests := []struct {
		key string
		set func(c *Config)
	}{
		{"data.files", func(c *Config) { c.Files = nil }},
		{"data.files", func(c *Config) { c.Files = []string{"[bad"} }},
		{"data.include", func(c *Config) { c.Include = []string{"[x"} }},
		{"data.tokenizer", func(c *Config) { c.Tokenizer = "chars" }},
		{"data.lowercase", func(c *Config) { c.Lowercase = true }},
		{"data.bpe_merges", func(c *Config) { c.BPEMerges = -1 }},
		{"data.min_count", func(c *Config) { c.MinCount = -2 }},
		{"data.max_vocabulary", func(c *Config) { c.MaxVocabulary = 1 }},
		{"data.boundary", func(c *Config) { c.Boundary = "sentence" }},
		{"data.validation_fraction", func(c *Config) { c.ValidationFraction = 0.6 }},
		{"data.test_fraction", func(c *Config) { c.TestFraction = -0.1 }},
		{"data.split", func(c *Config) { c.Split = "random" }},
		{"data.invalid_utf8", func(c *Config) { c.InvalidUTF8 = "skip" }},
	}
	for _, tt := range tests {
		c := good
		tt.set(&c)
		err := c.Validate()
		if err == nil || !strings.HasPrefix(err.Error(), tt.key) {
			t.Errorf("%s: got %v, want an error starting with the key", tt.key, err)
		}
	}
}
