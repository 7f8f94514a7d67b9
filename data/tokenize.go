package data

import (
	"unicode"
	"unicode/utf8"
)

// Kind is a tokenizer: how normalized text is cut into pieces.
type Kind uint8

// The tokenizers. See the package documentation for their exact rules.
const (
	KindChar    Kind = iota + 1 // one piece per Unicode code point
	KindByte                    // one piece per byte of the UTF-8 encoding
	KindWord                    // letter runs, digit runs, space runs, single other runes
	KindBPE                     // byte-pair merges within the pieces of KindWord
	KindSymbols                 // whitespace-separated symbols, and "\n"
)

var kindNames = [...]string{KindChar: "char", KindByte: "byte", KindWord: "word", KindBPE: "bpe", KindSymbols: "symbols"}

// String returns the tokenizer's config name, such as "char".
func (k Kind) String() string {
	if int(k) < len(kindNames) && kindNames[k] != "" {
		return kindNames[k]
	}
	return "unknown"
}

// parseKind maps a config name to a Kind.
func parseKind(s string) (Kind, bool) {
	for k, name := range kindNames {
		if name != "" && name == s {
			return Kind(k), true
		}
	}
	return 0, false
}

// Rune classes of the word and symbols splits.
const (
	clsNone    uint8 = iota
	clsLetter        // unicode.IsLetter or unicode.IsMark
	clsDigit         // unicode.IsNumber
	clsSpace         // unicode.IsSpace, except "\n"
	clsSingle        // "\n" and every other rune: a piece of its own
	clsSymbol        // symbols split: any rune that is not space
	clsNewline       // symbols split: "\n"
)

var asciiWordClass, asciiSymbolClass [utf8.RuneSelf]uint8

func init() {
	for r := rune(0); r < utf8.RuneSelf; r++ {
		asciiWordClass[r] = wordClass(r)
		asciiSymbolClass[r] = symbolClass(r)
	}
}

func wordClass(r rune) uint8 {
	switch {
	case r == '\n':
		return clsSingle
	case unicode.IsLetter(r) || unicode.IsMark(r):
		return clsLetter
	case unicode.IsNumber(r):
		return clsDigit
	case unicode.IsSpace(r):
		return clsSpace
	}
	return clsSingle
}

func symbolClass(r rune) uint8 {
	switch {
	case r == '\n':
		return clsNewline
	case unicode.IsSpace(r):
		return clsSpace
	}
	return clsSymbol
}

// segmenter cuts a stream of normalized text, given in chunks that end at
// rune boundaries, into the pieces of the word or symbols split. A piece
// may span chunks; it is held in pending until it ends, so the pieces do
// not depend on how the text was chunked.
type segmenter struct {
	symbols bool
	emit    func(piece []byte)
	pending []byte
	cls     uint8
}

func (s *segmenter) class(p []byte, i int) (uint8, int) {
	b := p[i]
	if b < utf8.RuneSelf {
		if s.symbols {
			return asciiSymbolClass[b], 1
		}
		return asciiWordClass[b], 1
	}
	r, size := utf8.DecodeRune(p[i:])
	if s.symbols {
		return symbolClass(r), size
	}
	return wordClass(r), size
}

func (s *segmenter) write(p []byte) {
	start := 0
	for i := 0; i < len(p); {
		c, size := s.class(p, i)
		if c != s.cls || c == clsSingle || c == clsNewline {
			if s.cls != clsNone {
				s.piece(p[start:i])
			}
			start, s.cls = i, c
		}
		i += size
	}
	s.pending = append(s.pending, p[start:]...)
}

// piece ends the current piece, whose last bytes are tail.
func (s *segmenter) piece(tail []byte) {
	seg := tail
	if len(s.pending) > 0 {
		s.pending = append(s.pending, tail...)
		seg = s.pending
	}
	if !(s.symbols && s.cls == clsSpace) && len(seg) > 0 {
		s.emit(seg)
	}
	s.pending = s.pending[:0]
}

func (s *segmenter) flush() {
	if s.cls != clsNone {
		s.piece(nil)
	}
	s.cls = clsNone
}

// appendLower appends p with its letters folded by unicode.ToLower.
func appendLower(dst, p []byte) []byte {
	for i := 0; i < len(p); {
		b := p[i]
		if b < utf8.RuneSelf {
			if 'A' <= b && b <= 'Z' {
				b += 'a' - 'A'
			}
			dst = append(dst, b)
			i++
			continue
		}
		r, size := utf8.DecodeRune(p[i:])
		dst = utf8.AppendRune(dst, unicode.ToLower(r))
		i += size
	}
	return dst
}

// hasUpper reports whether appendLower would change p.
func hasUpper(p []byte) bool {
	for i := 0; i < len(p); {
		b := p[i]
		if b < utf8.RuneSelf {
			if 'A' <= b && b <= 'Z' {
				return true
			}
			i++
			continue
		}
		r, size := utf8.DecodeRune(p[i:])
		if unicode.ToLower(r) != r {
			return true
		}
		i += size
	}
	return false
}

// splitter feeds normalized text to a tokenizer's piece function: for char
// one piece per rune, for byte one per byte, for word, bpe and symbols the
// pieces of the segmenter (lower-cased when asked). The pieces passed to
// fn are valid only during the call; chars is the number of runes of the
// original text the piece covers.
type splitter struct {
	kind  Kind
	lower bool
	fn    func(piece []byte, chars int)
	seg   segmenter
	low   []byte
}

func newSplitter(kind Kind, lower bool, fn func(piece []byte, chars int)) *splitter {
	s := &splitter{kind: kind, lower: lower, fn: fn}
	s.seg.symbols = kind == KindSymbols
	s.seg.emit = s.wordPiece
	return s
}

func (s *splitter) wordPiece(p []byte) {
	chars := utf8.RuneCount(p)
	if s.lower && hasUpper(p) {
		s.low = appendLower(s.low[:0], p)
		p = s.low
	}
	s.fn(p, chars)
}

func (s *splitter) write(p []byte) {
	switch s.kind {
	case KindChar:
		for i := 0; i < len(p); {
			size := 1
			if p[i] >= utf8.RuneSelf {
				_, size = utf8.DecodeRune(p[i:])
			}
			s.fn(p[i:i+size], 1)
			i += size
		}
	case KindByte:
		for i := range p {
			s.fn(p[i:i+1], byteChars(p[i]))
		}
	default:
		s.seg.write(p)
	}
}

func (s *splitter) flush() { s.seg.flush() }

// byteChars is 1 for a byte that starts a UTF-8 sequence and 0 for a
// continuation byte, so the byte pieces of a text sum to its rune count.
func byteChars(b byte) int {
	if b&0xC0 == 0x80 {
		return 0
	}
	return 1
}
