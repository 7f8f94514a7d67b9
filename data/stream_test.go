package data

import (
	"context"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"unicode/utf8"
)

// genReader yields size bytes of generated prose without holding them:
// words from a fixed list picked by a xorshift generator, a newline every
// so often (never when lineEvery is 0, the whole input then being one
// line), and a final "\n".
type genReader struct {
	left, col, lineEvery int
	state                uint64
	word                 string
}

var genWords = strings.SplitAfter("the whale sea ship captain Ahab harpoon white deep water sailor Queequeg mast oil boat Pequod Ishmael cried over 1851 naïve — , . ", " ")

func (g *genReader) Read(p []byte) (int, error) {
	if g.left == 0 {
		return 0, io.EOF
	}
	n := 0
	for n < len(p) && g.left > 0 {
		if g.left == 1 {
			p[n] = '\n'
			n++
			g.left--
			break
		}
		if g.word == "" {
			g.state ^= g.state << 13
			g.state ^= g.state >> 7
			g.state ^= g.state << 17
			g.word = genWords[g.state%uint64(len(genWords)-1)]
			if g.lineEvery > 0 && g.col > g.lineEvery {
				g.word = "\n"
				g.col = 0
			}
		}
		// A word may be cut anywhere, even inside a rune: the rest follows
		// in the next call, as a reader of a file would return it.
		k := copy(p[n:min(len(p), n+g.left-1)], g.word)
		g.word = g.word[k:]
		n += k
		g.left -= k
		g.col += k
	}
	return n, nil
}

// TestBoundedMemory streams a 48 MB generated corpus through counting
// (LearnVocab) and encoding (EncodeReader) and checks that the heap grows
// and allocates far less than the corpus size.
func TestBoundedMemory(t *testing.T) {
	if testing.Short() {
		t.Skip("streams 96 MB")
	}
	const size = 48 << 20
	const budget = 4 << 20 // bytes: well below the corpus size
	ctx := context.Background()
	for _, tk := range []string{"char", "word"} {
		var before, after runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&before)
		v, err := LearnVocab(ctx, &genReader{left: size, lineEvery: 70, state: 1}, "gen", VocabOptions{Tokenizer: tk})
		if err != nil {
			t.Fatal(err)
		}
		var tokens, chars int64
		err = v.EncodeReader(ctx, &genReader{left: size, lineEvery: 70, state: 1}, "gen", func(id, c int) {
			tokens++
			chars += int64(c)
		})
		if err != nil {
			t.Fatal(err)
		}
		runtime.ReadMemStats(&after)
		alloc := after.TotalAlloc - before.TotalAlloc
		inuse := int64(after.HeapInuse) - int64(before.HeapInuse)
		t.Logf("%s: %d tokens, %d characters; allocated %d bytes, heap grew %d bytes", tk, tokens, chars, alloc, inuse)
		if alloc > budget || inuse > budget {
			t.Errorf("%s: allocated %d bytes, heap grew %d bytes, for a %d-byte corpus; want both under %d", tk, alloc, inuse, size, budget)
		}
		if tokens == 0 || chars < size/2 {
			t.Errorf("%s: only %d tokens, %d characters", tk, tokens, chars)
		}
	}
}

// TestLongLine reads a single line of 100 MB through the char tokenizer,
// streaming, and a single line of 4 MB through Prepare with the word
// tokenizer.
func TestLongLine(t *testing.T) {
	ctx := context.Background()
	if !testing.Short() {
		const size = 100 << 20
		v, err := LearnVocab(ctx, &genReader{left: size, state: 3}, "line", VocabOptions{Tokenizer: "char"})
		if err != nil {
			t.Fatal(err)
		}
		var lines, chars int64
		nl, _ := v.ID("\n")
		err = v.EncodeReader(ctx, &genReader{left: size, state: 3}, "line", func(id, c int) {
			chars += int64(c)
			if id == nl {
				lines++
			}
		})
		if err != nil {
			t.Fatal(err)
		}
		if lines != 1 || chars == 0 {
			t.Errorf("got %d lines, %d characters, want 1 line", lines, chars)
		}
	}
	dir := t.TempDir()
	p := filepath.Join(dir, "line.txt")
	b, _ := io.ReadAll(&genReader{left: 4 << 20, state: 5})
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := DefaultConfig()
	cfg.Files = []string{p}
	cfg.Tokenizer = "word"
	ds, err := prepare(t, cfg, "")
	if err != nil {
		t.Fatal(err)
	}
	// The contiguous cuts fall inside the one line, which then counts in
	// each of the three splits.
	if ds.Train.Lines != 1 || ds.Validation.Lines != 1 || ds.Test.Lines != 1 {
		t.Errorf("lines per split: %d %d %d, want 1 1 1", ds.Train.Lines, ds.Validation.Lines, ds.Test.Lines)
	}
	if got, want := ds.Train.Characters+ds.Validation.Characters+ds.Test.Characters, int64(utf8.RuneCount(b)); got != want {
		t.Errorf("splits hold %d characters, want %d", got, want)
	}
	// The "\n" ends the test split and never occurs in training, so it is
	// unknown; besides it only the word cut by the split's start may be.
	if ds.Test.OOV < 1 || ds.Test.OOV > 2 || ds.Test.Tokens.At(ds.Test.Tokens.Len()-1) != ds.Vocab.Unknown() {
		t.Errorf("test split has %d unknown tokens, want 1 or 2, the last its newline", ds.Test.OOV)
	}
}
