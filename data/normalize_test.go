package data

import (
	"bytes"
	"errors"
	"io"
	"strings"
	"testing"
	"testing/iotest"
	"unicode/utf8"
)

func normalizeAll(r io.Reader, replace bool) (string, normStats, error) {
	n := newNormalizer(r, "f", replace)
	var out bytes.Buffer
	for {
		p, err := n.next()
		if err == io.EOF {
			return out.String(), n.stats, nil
		}
		if err != nil {
			return out.String(), n.stats, err
		}
		if !utf8.Valid(p) {
			return "", n.stats, errors.New("chunk ends inside a rune")
		}
		out.Write(p)
	}
}

func TestNormalize(t *testing.T) {
	tests := []struct {
		in, want string
		crlf     int64
		replaced int64
		bom      int
	}{
		{"plain\n", "plain\n", 0, 0, 0},
		{"\xEF\xBB\xBFbom\n", "bom\n", 0, 0, 1},
		{"mid \xEF\xBB\xBF bom stays\n", "mid \uFEFF bom stays\n", 0, 0, 0},
		{"a\r\nb\r\n", "a\nb\n", 2, 0, 0},
		{"lone\rcr\r", "lone\rcr\r", 0, 0, 0},
		{"bad \xff\xfe here", "bad \uFFFD\uFFFD here", 0, 2, 0},
		{"cut \xe2\x82", "cut \uFFFD\uFFFD", 0, 2, 0}, // a truncated 3-byte rune at the end
		{"", "", 0, 0, 0},
	}
	for _, tt := range tests {
		for name, r := range map[string]io.Reader{
			"whole": strings.NewReader(tt.in),
			"bytes": iotest.OneByteReader(strings.NewReader(tt.in)),
		} {
			got, st, err := normalizeAll(r, true)
			if err != nil || got != tt.want || st.CRLF != tt.crlf || st.Replaced != tt.replaced || st.BOM != tt.bom {
				t.Errorf("%s %q: got %q %+v %v, want %q crlf %d replaced %d bom %d", name, tt.in, got, st, err, tt.want, tt.crlf, tt.replaced, tt.bom)
			}
		}
	}
}

// FuzzNormalize checks on arbitrary bytes that the normalizer never
// panics, yields valid UTF-8 without NUL or CRLF, and gives the same text
// read whole or byte by byte.
func FuzzNormalize(f *testing.F) {
	for _, s := range []string{"a\r\nb", "\xEF\xBB\xBFx", "\xff", "\x00", "é\r", "\xe2\x82\xac\r\n"} {
		f.Add([]byte(s), true)
	}
	f.Fuzz(func(t *testing.T, in []byte, replace bool) {
		whole, _, errW := normalizeAll(bytes.NewReader(in), replace)
		bytewise, _, errB := normalizeAll(iotest.OneByteReader(bytes.NewReader(in)), replace)
		if (errW == nil) != (errB == nil) {
			t.Fatalf("whole: %v, byte by byte: %v", errW, errB)
		}
		if errW != nil {
			var pe *ParseError
			if !errors.As(errW, &pe) || (!errors.Is(errW, ErrBinary) && !errors.Is(errW, ErrInvalidUTF8)) {
				t.Fatalf("error %v is not a ParseError for NUL or invalid UTF-8", errW)
			}
			if replace && !errors.Is(errW, ErrBinary) {
				t.Fatalf("replace mode failed with %v", errW)
			}
			if errW.Error() != errB.Error() {
				t.Fatalf("errors differ: %v / %v", errW, errB)
			}
			return
		}
		if whole != bytewise {
			t.Fatalf("whole %q, byte by byte %q", whole, bytewise)
		}
		if !utf8.ValidString(whole) || strings.Contains(whole, "\x00") {
			t.Fatalf("output %q not normalized", whole)
		}
		// On valid input the text is the input without a leading BOM and
		// with each CRLF, found left to right, made "\n" ("\r\r\n" keeps
		// its first "\r").
		if in := string(in); utf8.ValidString(in) {
			if want := strings.ReplaceAll(strings.TrimPrefix(in, "\uFEFF"), "\r\n", "\n"); whole != want {
				t.Fatalf("normalized %q to %q, want %q", in, whole, want)
			}
		}
	})
}

// FuzzDecodeCache feeds damaged cache bytes to the decoder: it must return
// ErrCorrupt or a dataset, never panic.
func FuzzDecodeCache(f *testing.F) {
	v := vocabFor(f, "seed text for the cache\n", VocabOptions{Tokenizer: "word"})
	ds := &Dataset{Vocab: v}
	for i, name := range []string{SplitTrain, SplitValidation, SplitTest} {
		s := &Split{Name: name, vocab: v, Tokens: NewTokens(v.Encode(nil, "seed text\n")), Offset: -1}
		if i == 0 {
			s.odd = []oddChars{{1, 3}}
		}
		ds.Train, ds.Validation, ds.Test = s, s, s
	}
	good, err := encodeCache([32]byte{1}, ds)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(good)
	f.Add(good[:len(good)/2])
	f.Fuzz(func(t *testing.T, b []byte) {
		_, _, err := decodeCache(b)
		if err != nil && !errors.Is(err, ErrCorrupt) {
			t.Fatalf("error %v is not ErrCorrupt", err)
		}
	})
}
