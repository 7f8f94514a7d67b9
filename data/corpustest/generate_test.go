package corpustest

import (
	"bytes"
	"crypto/sha256"
	"io"
	"strings"
	"testing"
	"unicode/utf8"
)

// TestGenerate checks what Generate promises: exactly size bytes, the same
// bytes for the same seed (and a prefix of a longer text is not required),
// valid UTF-8 ending in "\n", other bytes for another seed, lines of the
// documented widths and word frequencies that fall with rank as Zipf's law
// says (the most frequent word about 1/H(4096) = 11.5% of the words, H the
// harmonic number; Zipf 1949, common practice).
func TestGenerate(t *testing.T) {
	for _, size := range []int64{1, 2, 3, 7, 1000, 1<<20 - 1, 1 << 20, 3<<20 + 17} {
		var a, b bytes.Buffer
		if err := Generate(&a, size, 42); err != nil {
			t.Fatal(err)
		}
		if err := Generate(&b, size, 42); err != nil {
			t.Fatal(err)
		}
		if int64(a.Len()) != size {
			t.Errorf("size %d: got %d bytes", size, a.Len())
		}
		if !bytes.Equal(a.Bytes(), b.Bytes()) {
			t.Errorf("size %d: two runs with seed 42 differ", size)
		}
		if !utf8.Valid(a.Bytes()) {
			t.Errorf("size %d: not valid UTF-8", size)
		}
		if a.Bytes()[a.Len()-1] != '\n' {
			t.Errorf("size %d: last byte %q, want a newline", size, a.Bytes()[a.Len()-1])
		}
	}
	var a, b bytes.Buffer
	if err := Generate(&a, 4<<20, 1); err != nil {
		t.Fatal(err)
	}
	if err := Generate(&b, 4<<20, 2); err != nil {
		t.Fatal(err)
	}
	if sha256.Sum256(a.Bytes()) == sha256.Sum256(b.Bytes()) {
		t.Error("seeds 1 and 2 give the same text")
	}
	text := a.String()
	alphabet := map[rune]bool{}
	for _, r := range text {
		alphabet[r] = true
	}
	if n := len(alphabet); n < 50 || n > 100 {
		t.Errorf("alphabet of %d characters, want about 65 (letters of both cases, 10 digits, 6 accented, space, newline, punctuation)", n)
	}
	lines := strings.Split(strings.TrimSuffix(text, "\n"), "\n")
	blank := 0
	for i, l := range lines {
		if l == "" {
			blank++
			continue
		}
		if utf8.RuneCountInString(l) > 100 {
			t.Fatalf("line %d has %d characters, want at most 99 plus a mark: %q", i, utf8.RuneCountInString(l), l)
		}
	}
	if f := float64(blank) / float64(len(lines)); f < 0.08 || f > 0.25 {
		t.Errorf("%.3f of the lines are blank, want about 1 in 6.5 (paragraphs of 2 to 9 lines)", f)
	}
	counts := map[string]int{}
	words := 0
	for _, w := range strings.Fields(strings.ToLower(text)) {
		counts[strings.TrimRight(w, ".,?!")]++
		words++
	}
	first, second := 0, 0
	for _, c := range counts {
		if c > first {
			first, second = c, first
		} else if c > second {
			second = c
		}
	}
	// Zipf: p(rank 1) = 1/H(4096) = 0.1146, p(rank 2) = half of it. The
	// capitalised forms fold onto the lower-case ones; a syllable word and a
	// number never coincide.
	if f := float64(first) / float64(words); f < 0.10 || f > 0.13 {
		t.Errorf("most frequent word is %.4f of the words, want 0.1146 (Zipf, 4,096 ranks)", f)
	}
	if r := float64(second) / float64(first); r < 0.4 || r > 0.6 {
		t.Errorf("second/first word frequency %.3f, want 0.5 (Zipf)", r)
	}
	if len(counts) < 3500 {
		t.Errorf("%d distinct words in 4 MB, want nearly all 4,096", len(counts))
	}
}

func TestGenerateSizeError(t *testing.T) {
	if err := Generate(io.Discard, 0, 1); err == nil {
		t.Error("size 0: no error")
	}
}

func BenchmarkGenerate(b *testing.B) {
	const size = 64 << 20
	b.SetBytes(size)
	for b.Loop() {
		if err := Generate(io.Discard, size, 1); err != nil {
			b.Fatal(err)
		}
	}
}
