package data

import (
	"bufio"
	"fmt"
	"os"

	"weft/data/atomicfile"
)

// A tokenSink takes a split's ids as Prepare encodes them, packed in the
// cache's width: in memory, or spooled to a temporary file in the cache
// folder so that encoding a corpus larger than memory holds a buffer, not
// the split.
type tokenSink struct {
	width int
	n     int64
	mem   []byte // when f is nil
	f     *os.File
	w     *bufio.Writer
	buf   [4]byte
}

func newMemSink(width int) *tokenSink { return &tokenSink{width: width} }

// newFileSink spools to a new temporary file in dir, named so that
// atomicfile.CleanTemp finds it after a crash.
func newFileSink(dir string, width int) (*tokenSink, error) {
	f, err := os.CreateTemp(dir, atomicfile.TempPrefix+"encoding-*")
	if err != nil {
		return nil, fmt.Errorf("token cache: %w", err)
	}
	return &tokenSink{width: width, f: f, w: bufio.NewWriterSize(f, 1<<20)}, nil
}

// add appends one id. A write error is kept by the buffered writer and
// reported by finish.
func (k *tokenSink) add(id int) {
	k.n++
	if k.f == nil {
		k.mem = appendID(k.mem, id, k.width)
		return
	}
	k.w.Write(appendID(k.buf[:0], id, k.width))
}

// finish flushes the sink and returns its ids as Tokens: a view of the
// memory, or reads of the spool file (which stays open until remove).
func (k *tokenSink) finish() (*Tokens, error) {
	if k.f == nil {
		return packedTokens(k.mem, k.width, int(k.n)), nil
	}
	if err := k.w.Flush(); err != nil {
		return nil, fmt.Errorf("token cache: spooling the encoded split: %w", err)
	}
	return &Tokens{n: int(k.n), width: k.width, r: k.f, name: k.f.Name()}, nil
}

// remove closes and deletes the spool file, if any.
func (k *tokenSink) remove() {
	if k != nil && k.f != nil {
		k.f.Close()
		os.Remove(k.f.Name())
		k.f = nil
	}
}
