package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
	"unicode/utf8"

	"weft/data"
	"weft/data/corpustest"
)

// TestPrepareSpeed checks prepare's throughput report against a clock that
// moves 2 s between its two readings: the input rate is the corpus's bytes
// (1,000,000, as written) over 2 s, the token rate the tokens over 2 s, and
// with the char tokenizer the tokens are the corpus's characters, counted
// here with utf8.RuneCount. When the cache is reused the rates are null.
func TestPrepareSpeed(t *testing.T) {
	dir := t.TempDir()
	corpus := filepath.Join(dir, "corpus.txt")
	const size = 1_000_000
	if err := corpustest.WriteFile(corpus, size, 3); err != nil {
		t.Fatal(err)
	}
	text, err := os.ReadFile(corpus)
	if err != nil {
		t.Fatal(err)
	}
	chars := int64(utf8.RuneCount(text))
	runFile := filepath.Join(dir, "run.toml")
	if err := os.WriteFile(runFile, []byte("[data]\nfiles = [\"corpus.txt\"]\ntokenizer = \"char\"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	prepare := func(args ...string) (int, string, string) {
		var out, errb bytes.Buffer
		clock := time.Date(2026, 12, 1, 12, 0, 0, 0, time.UTC)
		d := &deps{In: strings.NewReader(""), Out: &out, Err: &errb, Now: func() time.Time {
			now := clock
			clock = clock.Add(2 * time.Second)
			return now
		}}
		code := run(append([]string{"prepare", runFile, "--run", filepath.Join(dir, "r")}, args...), d)
		return code, out.String(), errb.String()
	}
	code, out, stderr := prepare("--json")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var got prepareJSON
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("%v in %s", err, out)
	}
	s := got.Speed
	if s.Seconds != 2 || s.CacheReused || s.InputBytes != size || s.Tokens != chars {
		t.Errorf("speed %+v, want 2 s, a new cache, %d input bytes, %d tokens", s, size, chars)
	}
	if s.MBPerSecond == nil || *s.MBPerSecond != 0.5 {
		t.Errorf("input MB/s %v, want 1,000,000 bytes / 2 s = 0.5", s.MBPerSecond)
	}
	if want := float64(chars) / 2; s.TokensPerSecond == nil || *s.TokensPerSecond != want {
		t.Errorf("tokens/s %v, want %d / 2 = %g", s.TokensPerSecond, chars, want)
	}
	if got.Train.Tokens+got.Validation.Tokens+got.Test.Tokens != chars {
		t.Errorf("the split report's tokens do not add up to %d", chars)
	}

	// The same corpus again: the cache is reused, nothing is tokenized.
	code, out, stderr = prepare("--json")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(out, `"input_mb_per_second": null`) || !strings.Contains(out, `"cache_reused": true`) {
		t.Errorf("reused cache: want null rates and cache_reused, got %s", out)
	}
	code, out, _ = prepare()
	if code != exitOK || !strings.Contains(out, "token cache read back in 2.0 s\n") {
		t.Errorf("exit %d, output %q: want the time of reading the cache back", code, out)
	}
	os.Remove(filepath.Join(dir, "r", data.TokenCacheFile))
	code, out, _ = prepare()
	want := "prepared in 2.0 s: 0.5 MB of input a second, " + thousands(int64(math.Round(float64(chars)/2))) + " tokens a second\n"
	if code != exitOK || !strings.Contains(out, want) {
		t.Errorf("exit %d, output %q: want %q", code, out, want)
	}
}
