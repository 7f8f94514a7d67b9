package data

import "fmt"

// Split names, in the order of Dataset.Splits.
const (
	SplitTrain      = "train"
	SplitValidation = "validation"
	SplitTest       = "test"
)

// A Split is one part of the corpus, encoded.
type Split struct {
	Name string // SplitTrain, SplitValidation or SplitTest

	// Tokens is the encoded text of the split, in corpus order: the lines
	// or documents of a hash split follow one another.
	Tokens []int

	// Characters counts the runes of normalized text. Bits per character
	// divide by the sum of TokenChars instead, which is the same number
	// for every tokenizer but symbols (CountedCharacters).
	Characters int64
	Lines      int64 // lines, a last line without "\n" included
	OOV        int64 // tokens that are the unknown entry

	// Offset is the rune offset of the split's first character in the
	// corpus for the contiguous split, and -1 for the hash splits.
	Offset int64

	vocab *Vocab
	odd   []oddChars // tokens whose character count differs from Vocab.Chars
}

// oddChars records the character count of one token that differs from its
// vocabulary entry's (an unknown word, a lower-cased letter that changed
// length).
type oddChars struct {
	Pos   int64
	Chars int32
}

// OOVRate returns the share of tokens that are the unknown entry, 0 for an
// empty split.
func (s *Split) OOVRate() float64 {
	if len(s.Tokens) == 0 {
		return 0
	}
	return float64(s.OOV) / float64(len(s.Tokens))
}

// TokenChars sets dst[i] to the number of characters of normalized text
// that token i stands for, and returns dst (grown to len(s.Tokens)). For
// every tokenizer but symbols (whose separating whitespace belongs to no
// token) the counts sum to s.Characters, so bits per character is the sum
// of the tokens' bits divided by that sum.
func (s *Split) TokenChars(dst []int) []int {
	if cap(dst) < len(s.Tokens) {
		dst = make([]int, len(s.Tokens))
	}
	dst = dst[:len(s.Tokens)]
	for i, id := range s.Tokens {
		dst[i] = int(s.vocab.chars[id])
	}
	for _, o := range s.odd {
		dst[o.Pos] = int(o.Chars)
	}
	return dst
}

// CountedCharacters is the sum of TokenChars, the denominator of bits
// per character: Characters for every tokenizer but symbols, whose
// whitespace between symbols belongs to no token and is not counted.
func (s *Split) CountedCharacters() int64 {
	var n int64
	for _, c := range s.TokenChars(nil) {
		n += int64(c)
	}
	return n
}

// Streams lays the split out as n continuous streams for evaluation: the
// tokens cut into n contiguous runs in order, the first len%n runs one
// token longer than the others. The runs share the split's backing array.
// A model scores each stream from its start, carrying its state along it.
func (s *Split) Streams(n int) ([][]int, error) {
	return EvalStreams(s.Tokens, n)
}

// EvalStreams cuts tokens into n contiguous runs as Split.Streams does.
func EvalStreams(tokens []int, n int) ([][]int, error) {
	if n < 1 {
		return nil, fmt.Errorf("evaluation streams must be at least 1, got %d", n)
	}
	if len(tokens) < 2*n {
		return nil, fmt.Errorf("%w: %d tokens for %d evaluation streams (need at least 2 per stream)", ErrTooSmall, len(tokens), n)
	}
	out := make([][]int, n)
	q, r := len(tokens)/n, len(tokens)%n
	at := 0
	for i := range out {
		k := q
		if i < r {
			k++
		}
		out[i] = tokens[at : at+k : at+k]
		at += k
	}
	return out, nil
}

// addToken appends one encoded token.
func (s *Split) addToken(id, chars int) {
	if id == 0 {
		s.OOV++
	}
	if int32(chars) != s.vocab.chars[id] {
		s.odd = append(s.odd, oddChars{int64(len(s.Tokens)), int32(chars)})
	}
	s.Tokens = append(s.Tokens, id)
}

// TokenOffsets sets dst[i] to the rune offset in the corpus of the first
// character of token i (for a token of no characters, such as the document
// boundary, the offset of the next character), and returns dst grown to
// len(s.Tokens). It lets the evaluation look up positions such as the
// demo corpus's marks. Only the contiguous split keeps the corpus order
// needed; the hash splits give an error.
func (s *Split) TokenOffsets(dst []int64) ([]int64, error) {
	if s.Offset < 0 {
		return nil, fmt.Errorf("%s split: token offsets need data.split = \"contiguous\"", s.Name)
	}
	if cap(dst) < len(s.Tokens) {
		dst = make([]int64, len(s.Tokens))
	}
	dst = dst[:len(s.Tokens)]
	at := s.Offset
	for i, c := range s.TokenChars(nil) {
		dst[i] = at
		at += int64(c)
	}
	return dst, nil
}
