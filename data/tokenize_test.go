package data

import (
	"context"
	"io"
	"reflect"
	"strings"
	"testing"
	"testing/iotest"
	"unicode/utf8"
)

// vocabFor builds a vocabulary over text itself, so every piece is known.
func vocabFor(t testing.TB, text string, opts VocabOptions) *Vocab {
	t.Helper()
	v, err := LearnVocab(context.Background(), strings.NewReader(text), "test", opts)
	if err != nil {
		t.Fatalf("LearnVocab: %v", err)
	}
	return v
}

var allTokenizers = []string{"char", "byte", "word", "bpe", "symbols"}

// canonicalSymbols is the text the symbols tokenizer reproduces: the
// symbols of each line joined by single spaces.
func canonicalSymbols(s string) string {
	lines := strings.Split(s, "\n")
	for i, l := range lines {
		lines[i] = strings.Join(strings.Fields(l), " ")
	}
	return strings.Join(lines, "\n")
}

// roundTrip checks decode(encode(text)) against the text each tokenizer
// promises to reproduce.
func roundTrip(t *testing.T, text string) {
	for _, tk := range allTokenizers {
		for _, lower := range []bool{false, true} {
			if lower && tk != "word" && tk != "bpe" {
				continue
			}
			for _, boundary := range []string{"", "line", "document"} {
				opts := VocabOptions{Tokenizer: tk, Lowercase: lower, BPEMerges: 50, Boundary: boundary}
				v := vocabFor(t, text, opts)
				ids := v.Encode(nil, text)
				got := v.Decode(ids)
				want := text
				if tk == "symbols" {
					want = canonicalSymbols(text)
				}
				if lower {
					want = string(appendLower(nil, []byte(text)))
				}
				if got != want {
					t.Fatalf("%+v: decode(encode(%q)) = %q, want %q", opts, text, got, want)
				}
				for _, id := range ids {
					if id == v.Unknown() {
						t.Fatalf("%+v: unknown token in %q though the vocabulary was built from it", opts, text)
					}
				}
			}
		}
	}
}

func TestRoundTrip(t *testing.T) {
	for _, text := range []string{
		"",
		"a",
		"Call me Ishmael. Some years ago\u2014never mind how long precisely\n",
		"  leading and trailing  \n\n\ttabs\tand\r lone CR\n",
		"numbers 1984 and 3.14, B52 bombers\n",
		"naïve café, Ünïcödé İstanbul ΣΊΣΥΦΟΣ\n",
		"emoji 🐋🐋 and combining e\u0301\u0301 marks\n",
		"no newline at end",
		"\n\n\n",
		"symbols: C4 E4 G4\nC4  E4\n\n A B \n",
	} {
		roundTrip(t, text)
	}
}

func FuzzRoundTrip(f *testing.F) {
	for _, s := range []string{"Call me Ishmael.", "a  b\n\nc", "Ünï 123 🐋\t!", "x\ry\r"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, text string) {
		if !utf8.ValidString(text) || strings.ContainsRune(text, 0) || strings.Contains(text, "\r\n") ||
			strings.HasPrefix(text, "\uFEFF") || len(text) > 200 {
			t.Skip("not normalized text")
		}
		roundTrip(t, text)
	})
}

// chunkReader returns the bytes of s in chunks of the given sizes, cycling.
type chunkReader struct {
	s     string
	sizes []int
	k     int
}

func (r *chunkReader) Read(p []byte) (int, error) {
	if r.s == "" {
		return 0, io.EOF
	}
	n := r.sizes[r.k%len(r.sizes)]
	r.k++
	n = min(n, len(p), len(r.s))
	copy(p, r.s[:n])
	r.s = r.s[n:]
	return n, nil
}

// TestChunkingInvariance checks that the token stream does not depend on
// how the input is chunked, as text/tabwriter's tests check its output.
func TestChunkingInvariance(t *testing.T) {
	text := strings.Repeat("Call me Ishmael.\r\nSome years ago\u2014never mind how long, 1851!  naïve 🐋\n\t\tindented  words ", 40)
	readers := map[string]func() io.Reader{
		"whole":    func() io.Reader { return strings.NewReader(text) },
		"byte":     func() io.Reader { return iotest.OneByteReader(strings.NewReader(text)) },
		"odd":      func() io.Reader { return &chunkReader{s: text, sizes: []int{3, 7, 1, 13, 2, 5}} },
		"halfread": func() io.Reader { return iotest.HalfReader(strings.NewReader(text)) },
	}
	for _, tk := range allTokenizers {
		opts := VocabOptions{Tokenizer: tk, BPEMerges: 40}
		var want []int
		var wantChars []int
		for _, name := range []string{"whole", "byte", "odd", "halfread"} {
			v, err := LearnVocab(context.Background(), readers[name](), name, opts)
			if err != nil {
				t.Fatal(err)
			}
			var got, chars []int
			err = v.EncodeReader(context.Background(), readers[name](), name, func(id, c int) {
				got = append(got, id)
				chars = append(chars, c)
			})
			if err != nil {
				t.Fatal(err)
			}
			if want == nil {
				want, wantChars = got, chars
				// The CRLF pairs are normalised, so the reference text has "\n".
				if dec, ref := v.Decode(got), strings.ReplaceAll(text, "\r\n", "\n"); tk != "symbols" && dec != ref {
					t.Fatalf("%s: decoded stream differs from the normalized text", tk)
				}
				continue
			}
			if !reflect.DeepEqual(got, want) || !reflect.DeepEqual(chars, wantChars) {
				t.Errorf("%s: reading %s gives %d tokens, whole gives %d; streams differ", tk, name, len(got), len(want))
			}
		}
	}
}

// TestWordSplit pins the word split on a worked example (derived by hand
// from the rules in the package documentation).
func TestWordSplit(t *testing.T) {
	text := "It's 1851—naïve  whales!\n\n"
	want := []string{"It", "'", "s", " ", "1851", "—", "naïve", "  ", "whales", "!", "\n", "\n"}
	var got []string
	sp := newSplitter(KindWord, false, func(p []byte, _ int) { got = append(got, string(p)) })
	sp.write([]byte(text))
	sp.flush()
	if !reflect.DeepEqual(got, want) {
		t.Errorf("word split of %q:\ngot  %q\nwant %q", text, got, want)
	}
	var syms []string
	sp = newSplitter(KindSymbols, false, func(p []byte, _ int) { syms = append(syms, string(p)) })
	sp.write([]byte(" C4\tE4  G4\n\nrest \n"))
	sp.flush()
	if want := []string{"C4", "E4", "G4", "\n", "\n", "rest", "\n"}; !reflect.DeepEqual(syms, want) {
		t.Errorf("symbols split: got %q, want %q", syms, want)
	}
}
