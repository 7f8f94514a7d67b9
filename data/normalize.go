package data

import (
	"io"
	"unicode/utf8"
)

// readChunk is the size of the raw reads; normalized chunks are at most this
// long, so reading holds O(readChunk) bytes whatever the corpus size.
const readChunk = 64 << 10

// normalizer turns the raw bytes of one corpus file into normalized text:
// valid UTF-8 (or an error), no byte-order mark, "\n" for each CRLF, no NUL.
// Each chunk it returns ends at a rune boundary and never between "\r" and
// "\n", so the chunking of the input does not change the output text.
type normalizer struct {
	r       io.Reader
	name    string
	replace bool

	raw        []byte // raw bytes; raw[start:end] is not yet processed
	start, end int
	offset     int64 // raw offset of raw[start]
	line       int   // current raw line, from 1
	bomDone    bool
	eof        bool
	out        []byte

	stats normStats
}

// normStats counts what normalization changed.
type normStats struct {
	CRLF     int64 // CRLF pairs turned into "\n"
	Replaced int64 // invalid bytes replaced by U+FFFD
	BOM      int   // byte-order marks stripped
}

func newNormalizer(r io.Reader, name string, replace bool) *normalizer {
	return &normalizer{r: r, name: name, replace: replace, raw: make([]byte, readChunk+8), line: 1, out: make([]byte, 0, readChunk+8)}
}

// fill moves the unprocessed tail to the front and reads until at least min
// unprocessed bytes are there or the input ends.
func (n *normalizer) fill(min int) error {
	if n.start > 0 {
		m := copy(n.raw, n.raw[n.start:n.end])
		n.start, n.end = 0, m
	}
	for empty := 0; !n.eof && n.end-n.start < min; {
		k, err := n.r.Read(n.raw[n.end:])
		n.end += k
		if err == io.EOF {
			n.eof = true
		} else if err != nil {
			return err
		}
		if k > 0 {
			empty = 0
		} else if empty++; empty >= 100 {
			return io.ErrNoProgress
		}
	}
	return nil
}

func (n *normalizer) fail(i int, err error) error {
	return &ParseError{File: n.name, Line: n.line, Offset: n.offset + int64(i), Err: err}
}

// next returns the next chunk of normalized text, valid until the following
// call, or io.EOF after the last one.
func (n *normalizer) next() ([]byte, error) {
	for {
		if err := n.fill(4); err != nil {
			return nil, &ParseError{File: n.name, Line: n.line, Offset: n.offset + int64(n.end-n.start), Err: err}
		}
		if !n.bomDone {
			n.bomDone = true
			if p := n.raw[n.start:n.end]; len(p) >= 3 && p[0] == 0xEF && p[1] == 0xBB && p[2] == 0xBF {
				n.start += 3
				n.offset += 3
				n.stats.BOM++
			}
		}
		if n.start == n.end && n.eof {
			return nil, io.EOF
		}
		out, err := n.process()
		if err != nil {
			return nil, err
		}
		if len(out) > 0 {
			return out, nil
		}
		if n.eof && n.start == n.end {
			return nil, io.EOF
		}
		// Only an incomplete rune or a lone "\r" is buffered: read more.
		if err := n.fill(n.end - n.start + 1); err != nil {
			return nil, &ParseError{File: n.name, Line: n.line, Offset: n.offset + int64(n.end-n.start), Err: err}
		}
	}
}

// process normalizes raw[start:end], leaving an incomplete tail unless the
// input has ended.
func (n *normalizer) process() ([]byte, error) {
	p := n.raw[n.start:n.end]
	out := n.out[:0]
	run := 0 // start of the bytes not yet copied to out
	i := 0
loop:
	for i < len(p) {
		b := p[i]
		if b >= 0x80 {
			r, size := utf8.DecodeRune(p[i:])
			if r == utf8.RuneError && size == 1 {
				if !n.eof && !utf8.FullRune(p[i:]) {
					break loop
				}
				if !n.replace {
					return nil, n.fail(i, ErrInvalidUTF8)
				}
				out = append(out, p[run:i]...)
				out = append(out, "\uFFFD"...)
				n.stats.Replaced++
				i++
				run = i
				continue
			}
			i += size
			continue
		}
		switch b {
		case '\n':
			n.line++
		case 0:
			return nil, n.fail(i, ErrBinary)
		case '\r':
			if i+1 == len(p) && !n.eof {
				break loop
			}
			if i+1 < len(p) && p[i+1] == '\n' {
				out = append(out, p[run:i]...)
				n.stats.CRLF++
				i++ // the "\n" is copied with the next run
				run = i
				continue
			}
		}
		i++
	}
	out = append(out, p[run:i]...)
	n.start += i
	n.offset += int64(i)
	n.out = out
	return out, nil
}
