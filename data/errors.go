package data

import (
	"errors"
	"fmt"
)

// Sentinel errors, for errors.Is. The errors the package returns wrap them
// with the file or split they concern.
var (
	// ErrInvalidUTF8 is a byte sequence that is not UTF-8 (with
	// invalid_utf8 = "error").
	ErrInvalidUTF8 = errors.New("invalid UTF-8")

	// ErrBinary is a NUL byte, which no text corpus contains.
	ErrBinary = errors.New("NUL byte: binary file, not text")

	// ErrEmpty is a corpus or split with no text, or only whitespace.
	ErrEmpty = errors.New("no text")

	// ErrTooSmall is a split too short for the requested batch shape.
	ErrTooSmall = errors.New("too few tokens")

	// ErrCorrupt is an encoded cache or vocabulary file whose bytes do not
	// check out (bad magic, version, length or checksum).
	ErrCorrupt = errors.New("corrupt file")
)

// A ParseError is a problem at a place in a corpus file, as csv.ParseError
// is for a record. Line is 1-based and counts "\n" in the raw file; Offset
// is the 0-based byte offset in the raw file (before any byte-order mark is
// stripped or CRLF is normalised).
type ParseError struct {
	File   string // the file's path, or "-" for standard input
	Line   int    // line of the problem, from 1
	Offset int64  // byte offset of the problem, from 0
	Err    error  // the problem, such as ErrInvalidUTF8 or ErrBinary
}

func (e *ParseError) Error() string {
	return fmt.Sprintf("corpus %s: line %d, byte offset %d: %v", displayName(e.File), e.Line, e.Offset, e.Err)
}

func (e *ParseError) Unwrap() error { return e.Err }

// displayName quotes a file name for messages; "-" is standard input.
func displayName(name string) string {
	if name == "-" {
		return "standard input"
	}
	return fmt.Sprintf("%q", name)
}
