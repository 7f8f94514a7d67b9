package data

import (
	"encoding/binary"
	"fmt"
	"io"
)

// Tokens is a read-only sequence of token ids. A prepared split's tokens
// are a view of the token cache: its bytes mapped into memory where the
// system allows, read from the file window by window where it does not, so
// a split larger than memory costs the bytes a reader touches, not 8 bytes
// a token. Tokens made by NewTokens hold their ids in memory.
//
// A Tokens is safe for concurrent reads. Its methods panic on positions
// outside [0, Len()), as slice indexing does; a read error of the file
// fallback (the cache changed under a running process) panics too, with
// the file named: the cache was checked when it was opened.
type Tokens struct {
	n     int
	ints  []int  // in memory, from NewTokens
	b     []byte // packed ids, width bytes each: mapped or in memory
	width int
	r     io.ReaderAt // file fallback: packed ids from off
	off   int64
	name  string   // the file, for the fallback's panics
	m     *mapping // the cache file the ids come from, if any
}

// NewTokens returns the ids as a Tokens. It keeps ids, not a copy.
func NewTokens(ids []int) *Tokens {
	if ids == nil {
		ids = []int{} // in memory all the same
	}
	return &Tokens{n: len(ids), ints: ids}
}

// packedTokens views n ids of width bytes each at the start of b.
func packedTokens(b []byte, width, n int) *Tokens {
	return &Tokens{n: n, b: b[:n*width], width: width}
}

// Len returns the number of tokens; 0 for a nil Tokens.
func (t *Tokens) Len() int {
	if t == nil {
		return 0
	}
	return t.n
}

// At returns token i.
func (t *Tokens) At(i int) int {
	if uint(i) >= uint(t.Len()) {
		panic(fmt.Sprintf("data.Tokens: index %d out of range [0,%d)", i, t.Len()))
	}
	if t.ints != nil {
		return t.ints[i]
	}
	var buf [1]int
	if t.b != nil {
		decodeIDs(buf[:], t.b[i*t.width:], t.width) // no page accounting for one id
	} else {
		t.Read(buf[:], i)
	}
	return buf[0]
}

// tokenReadChunk is the most bytes the file fallback reads at once.
const tokenReadChunk = 1 << 16

// Read sets dst to the tokens from off on: dst[j] = At(off+j).
func (t *Tokens) Read(dst []int, off int) {
	if off < 0 || off > t.Len() || len(dst) > t.Len()-off {
		panic(fmt.Sprintf("data.Tokens: read [%d,%d) out of range [0,%d)", off, off+len(dst), t.Len()))
	}
	if len(dst) == 0 {
		return
	}
	switch {
	case t.ints != nil:
		copy(dst, t.ints[off:])
		return
	case t.b != nil:
		decodeIDs(dst, t.b[off*t.width:], t.width)
		if t.m != nil {
			t.m.read(len(dst) * t.width)
		}
		return
	}
	per := tokenReadChunk / t.width
	buf := make([]byte, min(len(dst), per)*t.width)
	for len(dst) > 0 {
		k := min(len(dst), per)
		p := buf[:k*t.width]
		if _, err := t.r.ReadAt(p, t.off+int64(off)*int64(t.width)); err != nil {
			panic(fmt.Sprintf("token cache %q: reading tokens %d to %d: %v", t.name, off, off+k, err))
		}
		decodeIDs(dst[:k], p, t.width)
		dst, off = dst[k:], off+k
	}
}

// decodeIDs sets dst to the ids packed in b, width bytes each
// (little-endian, as the cache stores them).
func decodeIDs(dst []int, b []byte, width int) {
	if width == 2 {
		for j := range dst {
			dst[j] = int(binary.LittleEndian.Uint16(b[2*j:]))
		}
		return
	}
	for j := range dst {
		dst[j] = int(binary.LittleEndian.Uint32(b[4*j:]))
	}
}

// appendID appends id packed in width bytes, as decodeIDs reads it.
func appendID(b []byte, id, width int) []byte {
	if width == 2 {
		return binary.LittleEndian.AppendUint16(b, uint16(id))
	}
	return binary.LittleEndian.AppendUint32(b, uint32(id))
}

// Slice returns the tokens [from, to) as a Tokens sharing t's storage.
func (t *Tokens) Slice(from, to int) *Tokens {
	if from < 0 || from > to || to > t.Len() {
		panic(fmt.Sprintf("data.Tokens: slice [%d:%d] out of range [0,%d)", from, to, t.Len()))
	}
	s := *t
	s.n = to - from
	switch {
	case t.ints != nil:
		s.ints = t.ints[from:to:to]
	case t.b != nil:
		s.b = t.b[from*t.width : to*t.width : to*t.width]
	default:
		s.off = t.off + int64(from)*int64(t.width)
	}
	return &s
}

// Ints returns the tokens as a slice: the ids themselves for a Tokens from
// NewTokens (do not modify them), a copy otherwise. A copy costs 8 bytes a
// token; readers of a split that may be large use Read on windows instead.
func (t *Tokens) Ints() []int {
	if t.Len() == 0 {
		return nil
	}
	if t.ints != nil {
		return t.ints
	}
	out := make([]int, t.n)
	t.Read(out, 0)
	return out
}

// Each calls f with successive windows of the tokens in order, each at
// most chunk tokens long, and the offset of its first token; it stops at
// the first error f returns. The window is reused between calls (and, for
// tokens from NewTokens, is the ids themselves): f must not keep or modify it.
func (t *Tokens) Each(chunk int, f func(off int, ids []int) error) error {
	if chunk < 1 {
		chunk = 1 << 16
	}
	if t.ints != nil {
		for off := 0; off < t.n; off += chunk {
			if err := f(off, t.ints[off:min(off+chunk, t.n)]); err != nil {
				return err
			}
		}
		return nil
	}
	buf := make([]int, min(chunk, t.Len()))
	for off := 0; off < t.Len(); off += chunk {
		w := buf[:min(chunk, t.n-off)]
		t.Read(w, off)
		if err := f(off, w); err != nil {
			return err
		}
	}
	return nil
}
