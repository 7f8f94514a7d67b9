package data

import (
	"flag"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the frozen cache fixture in testdata")

// TestCacheFixture reads the frozen version-1 cache in testdata (written by
// this test with -update from the text below) and checks that today's
// code decodes it and still writes the same bytes.
func TestCacheFixture(t *testing.T) {
	const text = "Frozen fixture: naïve whales.\nSecond line!\n"
	dir := writeFiles(t, map[string]string{"f.txt": text})
	cfg := testConfig("f.txt")
	cfg.Tokenizer = "bpe"
	cfg.BPEMerges = 5
	cfg.Lowercase = true
	cfg.Boundary = "line"
	ds, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	key := [32]byte{0: 0x77, 31: 0x01}
	b, err := encodeCache(key, ds)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join("testdata", "tokens-v1.bin")
	if *update {
		if err := os.WriteFile(path, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	frozen, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	got, gotKey, err := decodeCache(frozen)
	if err != nil {
		t.Fatal(err)
	}
	if gotKey != key || !slices.Equal(got.Train.Tokens.Ints(), ds.Train.Tokens.Ints()) || got.Vocab.Decode(got.Train.Tokens.Ints()) != "frozen fixture: naïve whales.\nsecond line!\n" {
		t.Errorf("frozen cache decodes to %q", got.Vocab.Decode(got.Train.Tokens.Ints()))
	}
	if string(frozen) != string(b) {
		t.Errorf("the cache written today differs from the frozen version-1 bytes; bump cacheVersion if the format changed")
	}
}
