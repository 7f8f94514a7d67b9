package data

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"
)

// writeFiles creates files under a temporary folder and returns it.
func writeFiles(t *testing.T, files map[string]string) string {
	t.Helper()
	dir := t.TempDir()
	for name, text := range files {
		p := filepath.Join(dir, filepath.FromSlash(name))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

func testConfig(files ...string) Config {
	cfg := DefaultConfig()
	cfg.Files = files
	cfg.ValidationFraction, cfg.TestFraction = 0, 0
	return cfg
}

func prepare(t *testing.T, cfg Config, dir string) (*Dataset, error) {
	t.Helper()
	return PrepareEnv(context.Background(), cfg, Env{BaseDir: dir, Stdin: strings.NewReader("")})
}

func decodeSplit(ds *Dataset, s *Split) string { return ds.Vocab.Decode(s.Tokens.Ints()) }

// TestBadInput checks that each kind of bad input gives a one-line error
// naming the file and the problem, or is repaired and counted.
func TestBadInput(t *testing.T) {
	dir := writeFiles(t, map[string]string{
		"bad.txt":        "line one\nline \xff two\n",
		"nul.txt":        "text\n\x00more\n",
		"bom.txt":        "\xEF\xBB\xBFhello\n",
		"crlf.txt":       "one\r\ntwo\r\nthree\rx\n",
		"empty.txt":      "",
		"blank.txt":      " \n\t\n  \n",
		"docs/a.md":      "markdown\n",
		"small.txt":      "tiny\n",
		"docs/.hidden.t": "x",
	})
	tests := []struct {
		name    string
		cfg     func(c *Config)
		wantErr []string // substrings of the error, all required
		is      error
	}{
		{"invalid utf8", func(c *Config) { c.Files = []string{"bad.txt"} }, []string{"bad.txt", "line 2", "byte offset 14", "invalid UTF-8"}, ErrInvalidUTF8},
		{"nul", func(c *Config) { c.Files = []string{"nul.txt"} }, []string{"nul.txt", "line 2", "byte offset 5", "binary"}, ErrBinary},
		{"empty", func(c *Config) { c.Files = []string{"empty.txt"} }, []string{"empty.txt", "empty or whitespace only"}, ErrEmpty},
		{"whitespace only", func(c *Config) { c.Files = []string{"blank.txt"} }, []string{"blank.txt", "empty or whitespace only"}, ErrEmpty},
		{"missing", func(c *Config) { c.Files = []string{"nope.txt"} }, []string{"nope.txt", "no such file"}, nil},
		{"no match in dir", func(c *Config) { c.Files = []string{"docs"}; c.Include = []string{"*.txt"} }, []string{"docs", "no files match"}, nil},
		{"glob no match", func(c *Config) { c.Files = []string{"*.csv"} }, []string{"*.csv", "matches no files"}, nil},
		{"too small for split", func(c *Config) { c.Files = []string{"small.txt"}; c.ValidationFraction = 0.05 }, []string{"small.txt", "validation split is empty"}, ErrTooSmall},
		{"bad config", func(c *Config) { c.Tokenizer = "wrod" }, []string{"data.tokenizer", "wrod"}, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			cfg := testConfig("small.txt")
			tt.cfg(&cfg)
			_, err := prepare(t, cfg, dir)
			if err == nil {
				t.Fatalf("got no error, want one containing %q", tt.wantErr)
			}
			msg := err.Error()
			for _, w := range tt.wantErr {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q does not contain %q", msg, w)
				}
			}
			if strings.Contains(msg, "\n") || msg != strings.ToLower(msg[:1])+msg[1:] {
				t.Errorf("error %q is not one lowercase line", msg)
			}
			if tt.is != nil && !errors.Is(err, tt.is) {
				t.Errorf("error %q is not %v", msg, tt.is)
			}
		})
	}

	t.Run("parse error fields", func(t *testing.T) {
		_, err := prepare(t, testConfig("bad.txt"), dir)
		var pe *ParseError
		if !errors.As(err, &pe) {
			t.Fatalf("got %v, want a *ParseError", err)
		}
		// "line one\n" is 9 bytes and "line " 5 more: the 0xff is byte 14 of line 2.
		if want := filepath.Join(dir, "bad.txt"); pe.File != want || pe.Line != 2 || pe.Offset != 14 {
			t.Errorf("got %s line %d offset %d, want %s line 2 offset 14", pe.File, pe.Line, pe.Offset, want)
		}
	})
	t.Run("replace invalid", func(t *testing.T) {
		cfg := testConfig("bad.txt")
		cfg.InvalidUTF8 = "replace"
		ds, err := prepare(t, cfg, dir)
		if err != nil {
			t.Fatal(err)
		}
		if got, want := decodeSplit(ds, ds.Train), "line one\nline \uFFFD two\n"; got != want || ds.Input.Replaced != 1 {
			t.Errorf("got %q with %d replaced, want %q with 1", got, ds.Input.Replaced, want)
		}
	})
	t.Run("bom and crlf", func(t *testing.T) {
		ds, err := prepare(t, testConfig("bom.txt", "crlf.txt"), dir)
		if err != nil {
			t.Fatal(err)
		}
		// A lone "\r" is not a line end and stays.
		if got, want := decodeSplit(ds, ds.Train), "hello\none\ntwo\nthree\rx\n"; got != want {
			t.Errorf("got %q, want %q", got, want)
		}
		if ds.Input.BOM != 1 || ds.Input.CRLF != 2 {
			t.Errorf("got %d BOM and %d CRLF, want 1 and 2", ds.Input.BOM, ds.Input.CRLF)
		}
	})
	t.Run("unreadable", func(t *testing.T) {
		if os.Geteuid() == 0 {
			t.Skip("running as root: permissions do not stop reads")
		}
		p := filepath.Join(dir, "secret.txt")
		os.WriteFile(p, []byte("x\n"), 0o000)
		_, err := prepare(t, testConfig(p), dir)
		if err == nil || !strings.Contains(err.Error(), "secret.txt") || !strings.Contains(err.Error(), "permission denied") {
			t.Errorf("got %v, want permission denied naming the file", err)
		}
	})
}

// failReader fails after some bytes, as a disk error would.
type failReader struct{ n int }

func (r *failReader) Read(p []byte) (int, error) {
	if r.n <= 0 {
		return 0, errors.New("input/output error")
	}
	k := min(len(p), r.n)
	for i := range p[:k] {
		p[i] = 'a'
	}
	r.n -= k
	return k, nil
}

func TestReadErrorNamesFile(t *testing.T) {
	_, err := LearnVocab(context.Background(), &failReader{n: 100}, "disk.txt", VocabOptions{Tokenizer: "char"})
	if err == nil || !strings.Contains(err.Error(), `"disk.txt"`) || !strings.Contains(err.Error(), "input/output error") {
		t.Errorf("got %v, want a read error naming disk.txt", err)
	}
}

func TestStdin(t *testing.T) {
	text := "from standard input\nsecond line\n"
	cache := t.TempDir()
	for i := 0; i < 2; i++ {
		ds, err := PrepareEnv(context.Background(), testConfig("-"), Env{CacheDir: cache, Stdin: strings.NewReader(text)})
		if err != nil {
			t.Fatal(err)
		}
		if got := decodeSplit(ds, ds.Train); got != text {
			t.Errorf("got %q, want %q", got, text)
		}
		if ds.Cache.Hit != (i == 1) {
			t.Errorf("run %d: cache hit %v, want %v (keyed by the content of standard input)", i, ds.Cache.Hit, i == 1)
		}
	}
	ents, _ := os.ReadDir(cache)
	if len(ents) != 1 {
		t.Errorf("cache folder holds %d files, want only %s (the spooled input removed)", len(ents), TokenCacheFile)
	}
}

func TestDirectoryFilters(t *testing.T) {
	dir := writeFiles(t, map[string]string{
		"c/b.go": "package b\n", "c/a.go": "package a\n", "c/a_test.go": "package a_test\n",
		"c/sub/z.go": "package z\n", "c/.git/x.go": "package x\n", "c/notes.txt": "notes\n",
	})
	cfg := testConfig("c")
	cfg.Include = []string{"*.go"}
	cfg.Exclude = []string{"*_test.go"}
	ds, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	// Walked in lexical order, hidden folders skipped.
	if got, want := decodeSplit(ds, ds.Train), "package a\npackage b\npackage z\n"; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
}

// numberedCorpus has n distinct lines, then the first dup lines again.
func numberedCorpus(n, dup int) string {
	var b strings.Builder
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, "line %05d of the corpus\n", i)
	}
	for i := 0; i < dup; i++ {
		fmt.Fprintf(&b, "line %05d of the corpus\n", i)
	}
	return b.String()
}

func TestContiguousSplit(t *testing.T) {
	text := numberedCorpus(1000, 0)
	dir := writeFiles(t, map[string]string{"c.txt": text})
	cfg := testConfig("c.txt")
	cfg.ValidationFraction, cfg.TestFraction = 0.1, 0.2
	ds, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	// 1000 lines of 25 characters: the cuts fall at 70% and 80% of 25000
	// characters (derived by hand), on line starts here.
	got := decodeSplit(ds, ds.Train) + decodeSplit(ds, ds.Validation) + decodeSplit(ds, ds.Test)
	if got != text {
		t.Fatalf("the three splits do not concatenate to the corpus")
	}
	for _, c := range []struct {
		s            *Split
		chars, lines int64
		offset       int64
	}{{ds.Train, 17500, 700, 0}, {ds.Validation, 2500, 100, 17500}, {ds.Test, 5000, 200, 20000}} {
		if c.s.Characters != c.chars || c.s.Lines != c.lines || c.s.Offset != c.offset || int64(c.s.Tokens.Len()) != c.chars {
			t.Errorf("%s: got %d chars, %d lines, offset %d, %d tokens; want %d, %d, %d, %d",
				c.s.Name, c.s.Characters, c.s.Lines, c.s.Offset, c.s.Tokens.Len(), c.chars, c.lines, c.offset, c.chars)
		}
		// One token per character: token i starts at character Offset+i.
		offs, err := c.s.TokenOffsets(nil)
		if err != nil || len(offs) == 0 || offs[0] != c.offset || offs[len(offs)-1] != c.offset+c.chars-1 {
			t.Errorf("%s: token offsets %v…, %v", c.s.Name, offs[:min(3, len(offs))], err)
		}
	}
}

func TestHashSplit(t *testing.T) {
	text := numberedCorpus(2000, 0)
	dir := writeFiles(t, map[string]string{"c.txt": text})
	cfg := testConfig("c.txt")
	cfg.Split = "line"
	cfg.ValidationFraction, cfg.TestFraction = 0.1, 0.1
	run := func(seed uint64) [3]string {
		cfg.SplitSeed = seed
		ds, err := prepare(t, cfg, dir)
		if err != nil {
			t.Fatal(err)
		}
		return [3]string{decodeSplit(ds, ds.Train), decodeSplit(ds, ds.Validation), decodeSplit(ds, ds.Test)}
	}
	a, b, c := run(7), run(7), run(8)
	if a != b {
		t.Errorf("same seed gave different splits")
	}
	if a == c {
		t.Errorf("seeds 7 and 8 gave the same splits")
	}
	// Disjoint and complete: every numbered line is in exactly one split,
	// and each split keeps corpus order.
	where := map[string]int{}
	for si, s := range a {
		prev := ""
		for _, l := range strings.SplitAfter(s, "\n") {
			if l == "" {
				continue
			}
			if _, dup := where[l]; dup {
				t.Fatalf("line %q in two splits", l)
			}
			where[l] = si
			if l < prev {
				t.Fatalf("split %d out of corpus order at %q", si, l)
			}
			prev = l
		}
	}
	if len(where) != 2000 {
		t.Errorf("splits hold %d distinct lines, want 2000", len(where))
	}
	// With shares of 0.1, about 200 lines each: 3 binomial standard
	// deviations of 2000·0.1·0.9 are ±40.
	for si := 1; si < 3; si++ {
		if n := strings.Count(a[si], "\n"); n < 160 || n > 240 {
			t.Errorf("split %d has %d lines, want 200±40", si, n)
		}
	}
}

func TestLeakage(t *testing.T) {
	// 900 distinct lines, then the first 100 again: with the contiguous cut
	// at 90%, the test split is exactly those 100 repeated lines, plus one
	// blank line, which is not counted.
	text := numberedCorpus(900, 100)
	dir := writeFiles(t, map[string]string{"c.txt": text})
	cfg := testConfig("c.txt")
	cfg.TestFraction = 0.1
	ds, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	if ds.Report.LeakedTestLines != 100 || ds.Test.Lines != 100 {
		t.Errorf("got %d leaked of %d test lines, want 100 of 100", ds.Report.LeakedTestLines, ds.Test.Lines)
	}
}

func TestVocabLimits(t *testing.T) {
	dir := writeFiles(t, map[string]string{"c.txt": "the cat saw the dog and the bird\n"})
	cfg := testConfig("c.txt")
	cfg.Tokenizer = "word"
	cfg.MinCount = 2
	ds, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	// Counted by hand: "the" ×3 and " " ×7 occur twice or more; "cat",
	// "saw", "dog", "and", "bird", "\n" once each.
	if got, want := ds.Vocab.Len(), 3; got != want {
		t.Errorf("vocabulary of %d entries, want %d (unknown, \" \", \"the\")", got, want)
	}
	if got, want := ds.Train.OOV, int64(6); got != want {
		t.Errorf("got %d unknown tokens, want %d", got, want)
	}
	if got, want := ds.Vocab.Decode(ds.Train.Tokens.Ints()), "the \uFFFD \uFFFD the \uFFFD \uFFFD the \uFFFD\uFFFD"; got != want {
		t.Errorf("decoded %q, want %q", got, want)
	}
	chars := ds.Train.TokenChars(nil)
	sum := 0
	for _, c := range chars {
		sum += c
	}
	if int64(sum) != ds.Train.Characters {
		t.Errorf("token characters sum to %d, want %d", sum, ds.Train.Characters)
	}
	cfg.MinCount, cfg.MaxVocabulary = 1, 4
	ds, err = prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	if got := []string{ds.Vocab.Piece(1), ds.Vocab.Piece(2), ds.Vocab.Piece(3)}; !reflect.DeepEqual(got, []string{" ", "the", "\n"}) || ds.Vocab.Len() != 4 {
		t.Errorf("capped vocabulary %q, want [\" \" the \"\\n\"]: by count, ties by bytes", got)
	}
}

func TestBoundary(t *testing.T) {
	dir := writeFiles(t, map[string]string{"a.txt": "C4 E4\nG4\n", "b.txt": "A4 B4\n"})
	cfg := testConfig("a.txt", "b.txt")
	cfg.Tokenizer = "symbols"
	for _, c := range []struct {
		boundary string
		want     []string
	}{
		{"line", []string{"C4", "E4", LinePiece, "G4", LinePiece, "A4", "B4", LinePiece}},
		{"document", []string{"C4", "E4", "\n", "G4", "\n", DocumentPiece, "A4", "B4", "\n", DocumentPiece}},
	} {
		cfg.Boundary = c.boundary
		ds, err := prepare(t, cfg, dir)
		if err != nil {
			t.Fatal(err)
		}
		var got []string
		for _, id := range ds.Train.Tokens.Ints() {
			got = append(got, ds.Vocab.Piece(id))
		}
		if !reflect.DeepEqual(got, c.want) {
			t.Errorf("boundary %s: got %q, want %q", c.boundary, got, c.want)
		}
		if dec := ds.Vocab.Decode(ds.Train.Tokens.Ints()); dec != "C4 E4\nG4\nA4 B4\n" {
			t.Errorf("boundary %s: decoded %q", c.boundary, dec)
		}
	}
}

func TestCache(t *testing.T) {
	dir := writeFiles(t, map[string]string{"c.txt": numberedCorpus(300, 0)})
	cache := t.TempDir()
	cfg := testConfig("c.txt")
	cfg.Tokenizer = "bpe"
	cfg.BPEMerges = 30
	cfg.ValidationFraction = 0.1
	env := Env{BaseDir: dir, CacheDir: cache}
	run := func() *Dataset {
		t.Helper()
		ds, err := PrepareEnv(context.Background(), cfg, env)
		if err != nil {
			t.Fatal(err)
		}
		return ds
	}
	first := run()
	if first.Cache.Hit {
		t.Fatal("first run hit the cache")
	}
	second := run()
	if !second.Cache.Hit {
		t.Fatal("second run missed the cache")
	}
	same := func(a, b *Dataset) bool {
		for i := range a.Splits() {
			x, y := a.Splits()[i], b.Splits()[i]
			if !slices.Equal(x.Tokens.Ints(), y.Tokens.Ints()) || !slices.Equal(x.TokenChars(nil), y.TokenChars(nil)) ||
				x.Characters != y.Characters || x.Lines != y.Lines || x.Offset != y.Offset {
				return false
			}
		}
		return a.Report == b.Report && reflect.DeepEqual(a.Vocab.Merges(), b.Vocab.Merges()) && a.Vocab.Len() == b.Vocab.Len()
	}
	if !same(first, second) {
		t.Fatalf("cached dataset differs from the built one:\n%+v\n%+v", first.Report, second.Report)
	}

	// A changed setting rebuilds.
	cfg.BPEMerges = 31
	if ds := run(); ds.Cache.Hit {
		t.Error("changed bpe_merges hit the cache")
	}
	if ds := run(); !ds.Cache.Hit {
		t.Error("unchanged settings missed the cache")
	}
	// A changed input rebuilds (the key holds size and modification time).
	p := filepath.Join(dir, "c.txt")
	os.WriteFile(p, []byte(numberedCorpus(301, 0)), 0o644)
	os.Chtimes(p, time.Now(), time.Now().Add(time.Hour))
	if ds := run(); ds.Cache.Hit || ds.Train.Lines == first.Train.Lines {
		t.Error("changed input hit the cache")
	}
	// want is copied out of the cache file and the file released: the
	// damage below is written over the file in place, and a mapped file
	// cut short under a reader faults (SIGBUS).
	want := run()
	for _, sp := range want.Splits() {
		sp.Tokens = NewTokens(sp.Tokens.Ints())
	}
	want.Close()

	// Damage: every truncation and a flipped byte at many offsets are
	// detected, reported and rebuilt.
	cp := filepath.Join(cache, TokenCacheFile)
	good, err := os.ReadFile(cp)
	if err != nil {
		t.Fatal(err)
	}
	damaged := map[string][]byte{"empty": {}, "header only": good[:cacheFixed], "half": good[:len(good)/2], "last byte cut": good[:len(good)-1]}
	for _, off := range []int{0, 9, 20, 45, 50, cacheFixed + 3, len(good) / 2, len(good) - 10, len(good) - 1} {
		b := append([]byte(nil), good...)
		b[off] ^= 0x10
		damaged[fmt.Sprintf("flip %d", off)] = b
	}
	for name, b := range damaged {
		if _, _, err := decodeCache(b); !errors.Is(err, ErrCorrupt) {
			t.Errorf("%s: decodeCache gave %v, want ErrCorrupt", name, err)
		}
		os.WriteFile(cp, b, 0o644)
		ds := run()
		if ds.Cache.Hit || !errors.Is(ds.Cache.Damaged, ErrCorrupt) {
			t.Errorf("%s: hit %v, damaged %v; want a rebuild reporting ErrCorrupt", name, ds.Cache.Hit, ds.Cache.Damaged)
		}
		if !same(ds, want) {
			t.Errorf("%s: rebuilt dataset differs", name)
		}
		ds.Close()
		if b, _ := os.ReadFile(cp); string(b) != string(good) {
			t.Errorf("%s: the rebuilt cache differs from the good one", name)
		}
	}
}

func TestVocabFile(t *testing.T) {
	text := "Call me Ishmael. Naïve 🐋 whales, 1851!\n"
	for _, tk := range allTokenizers {
		v := vocabFor(t, text, VocabOptions{Tokenizer: tk, BPEMerges: 10, Boundary: "line"})
		p := filepath.Join(t.TempDir(), VocabFile)
		if err := v.WriteFile(p); err != nil {
			t.Fatal(err)
		}
		w, err := ReadVocabFile(p)
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(v.Encode(nil, text), w.Encode(nil, text)) || w.Len() != v.Len() || !reflect.DeepEqual(v.Merges(), w.Merges()) {
			t.Errorf("%s: reloaded vocabulary encodes differently", tk)
		}
		for id := 0; id < v.Len(); id++ {
			if v.Piece(id) != w.Piece(id) || v.Count(id) != w.Count(id) || v.Chars(id) != w.Chars(id) {
				t.Errorf("%s: entry %d differs after reload", tk, id)
			}
		}
	}
	for name, bad := range map[string]string{
		"not json":      "{",
		"wrong format":  `{"format":"other","version":1}`,
		"new version":   `{"format":"weft-vocabulary","version":9}`,
		"no unknown":    `{"format":"weft-vocabulary","version":1,"tokenizer":"char","entries":[{"piece":"a"}]}`,
		"two-rune char": `{"format":"weft-vocabulary","version":1,"tokenizer":"char","entries":[{"piece":"<unk>"},{"piece":"ab"}]}`,
		"repeated":      `{"format":"weft-vocabulary","version":1,"tokenizer":"word","entries":[{"piece":"<unk>"},{"piece":"ab"},{"piece":"ab"}]}`,
		"bad merge":     `{"format":"weft-vocabulary","version":1,"tokenizer":"bpe","entries":[{"piece":"<unk>"}],"bpe_alphabet":["a"],"bpe_merges":[["a","b"]]}`,
	} {
		var v Vocab
		if err := v.UnmarshalJSON([]byte(bad)); !errors.Is(err, ErrCorrupt) {
			t.Errorf("%s: got %v, want ErrCorrupt", name, err)
		}
	}
}

func TestBPEDeterminism(t *testing.T) {
	text := strings.Repeat("low lower lowest newer newest wider wide widest ", 20) + numberedCorpus(200, 0)
	opts := VocabOptions{Tokenizer: "bpe", BPEMerges: 40}
	a := vocabFor(t, text, opts).Merges()
	for i := 0; i < 3; i++ {
		if b := vocabFor(t, text, opts).Merges(); !reflect.DeepEqual(a, b) {
			t.Fatalf("learning %d gave different merges", i+2)
		}
	}
	if len(a) != 40 {
		t.Errorf("learned %d merges, want 40", len(a))
	}
}

// TestBPEWorkedExample follows the toy dictionary of Sennrich, Haddow &
// Birch (2016), section 3.2 (low ×5, lower ×2, newest ×6, widest ×3). The
// paper's first merges are "e s", "es t", "est </w>", "l o", "lo w", using
// an end-of-word marker that weft does not add: without it the third merge
// is instead the next most frequent pair. Counts derived by hand: "e s" and
// "s t" tie at 9 (newest + widest) and "e" < "s" by bytes; then "es t" (9);
// then "l o" and "o w" tie at 7 (low + lower); then "lo w" (7); then "n e",
// "e w" and "w est" tie at 6 and "e w" has the smallest left symbol.
func TestBPEWorkedExample(t *testing.T) {
	counts := map[string]int64{"low": 5, "lower": 2, "newest": 6, "widest": 3}
	m := learnBPE(counts, 5)
	want := [][2]string{{"e", "s"}, {"es", "t"}, {"l", "o"}, {"lo", "w"}, {"e", "w"}}
	if !reflect.DeepEqual(m.merges, want) {
		t.Errorf("got merges %q, want %q", m.merges, want)
	}
}

// TestBPESample lowers the sampling size below a 24 KB corpus: the merges
// are learned on about that share of the piece occurrences, the same
// sample every time for a seed and another for another seed, the report
// says so, and the whole split is still encoded. Above the size nothing is
// sampled.
func TestBPESample(t *testing.T) {
	text := numberedCorpus(1000, 0) // 24,000 bytes
	dir := writeFiles(t, map[string]string{"c.txt": text})
	cfg := testConfig("c.txt")
	cfg.Tokenizer, cfg.BPEMerges = "bpe", 20
	whole, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	if whole.Report.BPESample != nil {
		t.Fatalf("a %d-byte corpus under %d was sampled: %+v", len(text), bpeSampleBytes, whole.Report.BPESample)
	}
	defer func(n int64) { bpeSampleBytes = n }(bpeSampleBytes)
	bpeSampleBytes = int64(len(text)) / 4
	a, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	b, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	s := a.Report.BPESample
	if s == nil {
		t.Fatal("no sample reported")
	}
	// Binomial(Of, 1/4): the standard deviation is sqrt(Of·3/16), about 2%
	// of Of/4 here; 5 of them is a loose bound.
	if want := float64(s.Of) / 4; math.Abs(float64(s.Pieces)-want) > 5*math.Sqrt(float64(s.Of)*3/16) || s.Seed != cfg.SplitSeed {
		t.Errorf("sample %+v, want about %.0f pieces with seed %d", *s, want, cfg.SplitSeed)
	}
	if *b.Report.BPESample != *s || !reflect.DeepEqual(a.Vocab.Merges(), b.Vocab.Merges()) {
		t.Error("the same seed gave another sample")
	}
	if got := decodeSplit(a, a.Train); got != text {
		t.Errorf("the sampled vocabulary encodes the split as %q...", got[:40])
	}
	cfg.SplitSeed = 99
	c, err := prepare(t, cfg, dir)
	if err != nil {
		t.Fatal(err)
	}
	if c.Report.BPESample.Pieces == s.Pieces && reflect.DeepEqual(c.Vocab.Merges(), a.Vocab.Merges()) {
		t.Error("another seed gave the same sample")
	}
}
