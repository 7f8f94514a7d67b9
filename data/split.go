package data

import (
	"fmt"
	"sort"
)

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
	// or documents of a hash split follow one another. For a split read
	// from the token cache it is a view of the cache file, not a copy.
	Tokens *Tokens

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
	sink  *tokenSink // while Prepare encodes the split
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
	if s.Tokens.Len() == 0 {
		return 0
	}
	return float64(s.OOV) / float64(s.Tokens.Len())
}

// TokenChars sets dst[i] to the number of characters of normalized text
// that token i stands for, and returns dst (grown to s.Tokens.Len()). For
// every tokenizer but symbols (whose separating whitespace belongs to no
// token) the counts sum to s.Characters, so bits per character is the sum
// of the tokens' bits divided by that sum. It costs 8 bytes a token;
// WindowChars gives the counts of a window.
func (s *Split) TokenChars(dst []int) []int {
	n := s.Tokens.Len()
	if cap(dst) < n {
		dst = make([]int, n)
	}
	dst = dst[:n]
	s.Tokens.Read(dst, 0)
	return s.WindowChars(dst, dst, 0)
}

// WindowChars sets dst[j] to the character count of token off+j, whose id
// is ids[j] (the tokens Tokens.Read gives for the window), and returns dst.
// dst may be ids itself.
func (s *Split) WindowChars(dst, ids []int, off int) []int {
	dst = dst[:len(ids)]
	for j, id := range ids {
		dst[j] = int(s.vocab.chars[id])
	}
	// The records are in position order: find the window's first.
	lo := sort.Search(len(s.odd), func(m int) bool { return s.odd[m].Pos >= int64(off) })
	for _, o := range s.odd[lo:] {
		if o.Pos >= int64(off+len(dst)) {
			break
		}
		dst[o.Pos-int64(off)] = int(o.Chars)
	}
	return dst
}

// CountedCharacters is the sum of TokenChars, the denominator of bits
// per character: Characters for every tokenizer but symbols, whose
// whitespace between symbols belongs to no token and is not counted.
func (s *Split) CountedCharacters() int64 { return s.PrefixCharacters(s.Tokens.Len()) }

// PrefixCharacters is the sum of TokenChars over the first n tokens,
// counted window by window.
func (s *Split) PrefixCharacters(n int) int64 {
	var c int64
	s.Tokens.Slice(0, n).Each(1<<16, func(_ int, ids []int) error {
		for _, id := range ids {
			c += int64(s.vocab.chars[id])
		}
		return nil
	})
	for _, o := range s.odd {
		if o.Pos >= int64(n) {
			break
		}
		c += int64(o.Chars) - int64(s.vocab.chars[s.Tokens.At(int(o.Pos))])
	}
	return c
}

// Streams lays the split out as n continuous streams for evaluation: the
// tokens cut into n contiguous runs in order, the first len%n runs one
// token longer than the others. The runs are copies of the split's ids.
// A model scores each stream from its start, carrying its state along it.
func (s *Split) Streams(n int) ([][]int, error) {
	return EvalStreams(s.Tokens.Ints(), n)
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

// addToken appends one encoded token to the split's sink.
func (s *Split) addToken(id, chars int) {
	if id == 0 {
		s.OOV++
	}
	if int32(chars) != s.vocab.chars[id] {
		s.odd = append(s.odd, oddChars{s.sink.n, int32(chars)})
	}
	s.sink.add(id)
}

// TokenOffsets sets dst[i] to the rune offset in the corpus of the first
// character of token i (for a token of no characters, such as the document
// boundary, the offset of the next character), and returns dst grown to
// s.Tokens.Len(). It lets the evaluation look up positions such as the
// demo corpus's marks. Only the contiguous split keeps the corpus order
// needed; the hash splits give an error.
func (s *Split) TokenOffsets(dst []int64) ([]int64, error) {
	if s.Offset < 0 {
		return nil, fmt.Errorf("%s split: token offsets need data.split = \"contiguous\"", s.Name)
	}
	n := s.Tokens.Len()
	if cap(dst) < n {
		dst = make([]int64, n)
	}
	dst = dst[:n]
	at := s.Offset
	for i, c := range s.TokenChars(nil) {
		dst[i] = at
		at += int64(c)
	}
	return dst, nil
}
