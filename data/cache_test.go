package data

import (
	"context"
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

// TestSpooledCacheBytes: the cache Prepare writes through its spool files
// (a corpus larger than memory) is byte for byte what the in-memory
// encoder writes for the same dataset, and the splits it maps read back
// the same ids, for a tokenizer with character records (lower-cased word
// pieces, unknown words) and the line split.
func TestSpooledCacheBytes(t *testing.T) {
	dir := writeFiles(t, map[string]string{"c.txt": numberedCorpus(400, 30) + "Über Straße ÆON\n"})
	cfg := testConfig("c.txt")
	cfg.Tokenizer, cfg.Lowercase, cfg.MinCount = "word", true, 2
	cfg.Split, cfg.ValidationFraction, cfg.TestFraction = "line", 0.1, 0.1
	mem, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	cache := t.TempDir()
	ds, err := PrepareEnv(context.Background(), cfg, Env{BaseDir: dir, CacheDir: cache})
	if err != nil {
		t.Fatal(err)
	}
	defer ds.Close()
	written, err := os.ReadFile(filepath.Join(cache, TokenCacheFile))
	if err != nil {
		t.Fatal(err)
	}
	var key [32]byte
	copy(key[:], written[12:44])
	want, err := encodeCache(key, mem)
	if err != nil {
		t.Fatal(err)
	}
	if string(written) != string(want) {
		t.Errorf("the spooled cache (%d bytes) differs from the in-memory encoding (%d bytes)", len(written), len(want))
	}
	for i, s := range ds.Splits() {
		m := mem.Splits()[i]
		if !slices.Equal(s.Tokens.Ints(), m.Tokens.Ints()) || !slices.Equal(s.TokenChars(nil), m.TokenChars(nil)) || len(m.odd) == 0 && i == 0 {
			t.Errorf("%s split: the mapped ids or characters differ (or the test has no character records)", s.Name)
		}
	}
	if ents, _ := os.ReadDir(cache); len(ents) != 1 {
		t.Errorf("the cache folder holds %d files, want only %s (the spool files removed)", len(ents), TokenCacheFile)
	}
}
