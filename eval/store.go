package eval

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"weft/data/atomicfile"
)

// Baseline files. Fitted baselines are cached in a run directory in a
// small format of weft's own, one model a file, little-endian:
//
//	offset  size  field
//	0       8     magic "WEFTBASE"
//	8       2     format version, uint16 (FormatVersion)
//	10      2     kind, uint16: 1 n-gram counts, 2 hidden Markov model
//	12      4     zero
//	16      8     payload length P, uint64
//	24      P     payload
//	24+P    32    SHA-256 of bytes 0 .. 24+P-1
//
// The n-gram payload is a list of unsigned varints (encoding/binary):
// order, vocabulary size V, boundary+1 (0: none), training tokens, the
// number of contexts C and of events E; then for contexts 1..C-1 (0 is the
// empty context) its parent context and symbol (V for the start padding),
// each parent earlier than its child; then for each event its context,
// token and raw count; then, from version 3 on and only when the counts
// were taken on a subset of the training split (CountNGramsOf), the number
// of tokens of the whole split. Continuation counts and summaries are
// derived on loading. Smoothing parameters are not stored: every n-gram model of the
// ladder is rebuilt from one counts file with NewNGram.
//
// The HMM payload is varints N, V, boundary+1 and the number I of
// recorded log-likelihoods, then float64 values: the emission floor ε, its
// distribution q over the V symbols (TrainHMM), the I log-likelihoods,
// π (N), a (N×N, row-major) and b (V×N, symbol-major).
//
// Versions: 1 had no q (the floor was uniform, ε/V for every symbol); its
// n-gram counts files read as version 2's, and its HMM files are refused
// with ErrStaleHMM, so that a cache of them is fitted again. 3 added the
// split's tokens after the events of counts taken on a subset; counts of
// a whole split are written as version 2 wrote them, and HMM files did not
// change.
const FormatVersion = 3

// ErrStaleHMM is wrapped by the error of reading a hidden Markov model
// saved by format version 1, whose uniform emission floor charged symbols
// its training tokens lacked about 20 + log2 V bits: fit it again.
var ErrStaleHMM = errors.New("hidden Markov model saved with the uniform emission floor of format version 1: fit it again")

const (
	kindCounts = 1
	kindHMM    = 2
	headerSize = 24
	magic      = "WEFTBASE"
)

// ErrCorrupt is wrapped by the errors of reading a damaged or truncated
// baseline file.
var ErrCorrupt = errors.New("corrupt baseline file")

// WriteCounts writes c in the baseline file format.
func WriteCounts(w io.Writer, c *Counts) error {
	p := make([]byte, 0, 64+len(c.ctxParent)*4+len(c.evCount)*8)
	for _, v := range []int{c.order, c.vocab, c.boundary + 1, c.tokens, len(c.ctxParent), len(c.evCount)} {
		p = binary.AppendUvarint(p, uint64(v))
	}
	sym := make([]int32, len(c.ctxParent))
	V1 := uint64(c.vocab + 1)
	for i, k := range c.ctxIndex.keys {
		if k != 0 {
			sym[c.ctxIndex.vals[i]] = int32((k - 1) % V1)
		}
	}
	for id := 1; id < len(c.ctxParent); id++ {
		p = binary.AppendUvarint(p, uint64(c.ctxParent[id]))
		p = binary.AppendUvarint(p, uint64(sym[id]))
	}
	for e := range c.evCount {
		p = binary.AppendUvarint(p, uint64(c.evCtx[e]))
		p = binary.AppendUvarint(p, uint64(c.evWord[e]))
		p = binary.AppendUvarint(p, uint64(c.evCount[e]))
	}
	if c.split > c.tokens {
		p = binary.AppendUvarint(p, uint64(c.split))
	}
	return writeFile(w, kindCounts, p)
}

// ReadCounts reads counts written by WriteCounts. Damage gives an error
// wrapping ErrCorrupt, never a panic.
func ReadCounts(r io.Reader) (*Counts, error) {
	p, version, err := readFile(r, kindCounts)
	if err != nil {
		return nil, err
	}
	d := decoder{buf: p}
	order, vocab, b1, tokens := d.int(MaxOrder), d.int(math.MaxInt32-1), d.int(math.MaxInt32), d.int(math.MaxUint32)
	nctx, nev := d.int(math.MaxInt32), d.int(math.MaxInt32)
	if d.err != nil {
		return nil, d.err
	}
	if order < 1 || vocab < 1 || b1 > vocab || nctx < 1 {
		return nil, fmt.Errorf("%w: header (order %d, vocabulary %d, boundary %d, %d contexts)", ErrCorrupt, order, vocab, b1-1, nctx)
	}
	// Every context and event takes at least 2 and 3 payload bytes: refuse
	// counts the payload cannot hold before allocating for them.
	if 2*(nctx-1)+3*nev > len(p) {
		return nil, fmt.Errorf("%w: %d contexts and %d events do not fit %d bytes", ErrCorrupt, nctx, nev, len(p))
	}
	c := newCounts(vocab, order, b1-1, nev)
	c.tokens = tokens
	V1 := uint64(vocab + 1)
	for id := 1; id < nctx; id++ {
		parent, sym := d.int(id-1), d.int(vocab)
		if d.err != nil {
			return nil, d.err
		}
		depth := int(c.ctxDepth[parent]) + 1
		if depth >= order {
			return nil, fmt.Errorf("%w: context %d deeper than order %d allows", ErrCorrupt, id, order)
		}
		if _, added := c.ctxIndex.getOrPut(uint64(parent)*V1+uint64(sym), int32(id)); !added {
			return nil, fmt.Errorf("%w: context %d repeats another", ErrCorrupt, id)
		}
		c.ctxParent = append(c.ctxParent, int32(parent))
		c.ctxDepth = append(c.ctxDepth, uint8(depth))
	}
	V := uint64(vocab)
	for e := range nev {
		ctx, w, n := d.int(nctx-1), d.int(vocab-1), d.int(math.MaxUint32)
		if d.err != nil {
			return nil, d.err
		}
		if n < 1 {
			return nil, fmt.Errorf("%w: event %d has count 0", ErrCorrupt, e)
		}
		if _, added := c.evIndex.getOrPut(uint64(ctx)*V+uint64(w), int32(e)); !added {
			return nil, fmt.Errorf("%w: event %d repeats another", ErrCorrupt, e)
		}
		c.evCtx = append(c.evCtx, int32(ctx))
		c.evWord = append(c.evWord, int32(w))
		c.evCount = append(c.evCount, uint32(n))
	}
	c.split = tokens
	if version >= 3 && len(d.buf) != 0 {
		c.split = d.int(math.MaxInt64)
		if d.err != nil {
			return nil, d.err
		}
		if c.split <= tokens {
			return nil, fmt.Errorf("%w: a subset of %d tokens from a split of %d", ErrCorrupt, tokens, c.split)
		}
	}
	if len(d.buf) != 0 {
		return nil, fmt.Errorf("%w: %d bytes after the events", ErrCorrupt, len(d.buf))
	}
	c.finish()
	return c, nil
}

// WriteHMM writes h in the baseline file format.
func WriteHMM(w io.Writer, h *HMM) error {
	var p []byte
	for _, v := range []int{h.n, h.v, h.boundary + 1, len(h.LogLik)} {
		p = binary.AppendUvarint(p, uint64(v))
	}
	p = binary.LittleEndian.AppendUint64(p, math.Float64bits(h.floor))
	for _, xs := range [][]float64{h.floorDist, h.LogLik, h.pi, h.a, h.bt} {
		for _, x := range xs {
			p = binary.LittleEndian.AppendUint64(p, math.Float64bits(x))
		}
	}
	return writeFile(w, kindHMM, p)
}

// ReadHMM reads a model written by WriteHMM. Damage gives an error
// wrapping ErrCorrupt, never a panic.
func ReadHMM(r io.Reader) (*HMM, error) {
	p, version, err := readFile(r, kindHMM)
	if err != nil {
		return nil, err
	}
	if version < 2 {
		return nil, ErrStaleHMM
	}
	d := decoder{buf: p}
	n, v, b1, iters := d.int(MaxHMMStates), d.int(math.MaxInt32-1), d.int(math.MaxInt32), d.int(math.MaxInt32)
	if d.err != nil {
		return nil, d.err
	}
	if n < 1 || v < 1 || b1 > v {
		return nil, fmt.Errorf("%w: header (%d states, %d symbols, boundary %d)", ErrCorrupt, n, v, b1-1)
	}
	want := 8 * (1 + v + iters + n + n*n + v*n)
	if iters > len(d.buf) || len(d.buf) != want {
		return nil, fmt.Errorf("%w: %d payload bytes for %d states and %d symbols, want %d", ErrCorrupt, len(d.buf), n, v, want)
	}
	f := func(k int) []float64 {
		x := make([]float64, k)
		for i := range x {
			x[i] = math.Float64frombits(binary.LittleEndian.Uint64(d.buf))
			d.buf = d.buf[8:]
		}
		return x
	}
	h := &HMM{n: n, v: v, boundary: b1 - 1}
	h.floor = f(1)[0]
	h.floorDist = f(v)
	h.LogLik = f(iters)
	h.pi, h.a, h.bt = f(n), f(n*n), f(v*n)
	if !(h.floor >= 0 && h.floor <= 1) {
		return nil, fmt.Errorf("%w: emission floor %g", ErrCorrupt, h.floor)
	}
	for _, x := range [][]float64{h.floorDist, h.pi, h.a, h.bt} {
		for _, p := range x {
			if !(p >= 0 && p <= 1) {
				return nil, fmt.Errorf("%w: probability %g", ErrCorrupt, p)
			}
		}
	}
	return h, nil
}

// SaveCounts writes c to the file path atomically (atomicfile.Write).
func SaveCounts(path string, c *Counts) error {
	return saveFile(path, func(w io.Writer) error { return WriteCounts(w, c) })
}

// LoadCounts reads counts saved by SaveCounts; errors name the file.
func LoadCounts(path string) (*Counts, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("load baseline: %w", err)
	}
	defer f.Close()
	c, err := ReadCounts(f)
	if err != nil {
		return nil, fmt.Errorf("load baseline %q: %w", path, err)
	}
	return c, nil
}

// SaveHMM writes h to the file path atomically.
func SaveHMM(path string, h *HMM) error {
	return saveFile(path, func(w io.Writer) error { return WriteHMM(w, h) })
}

// LoadHMM reads a model saved by SaveHMM; errors name the file.
func LoadHMM(path string) (*HMM, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("load baseline: %w", err)
	}
	defer f.Close()
	h, err := ReadHMM(f)
	if err != nil {
		return nil, fmt.Errorf("load baseline %q: %w", path, err)
	}
	return h, nil
}

func saveFile(path string, write func(io.Writer) error) error {
	if err := atomicfile.Write(path, write); err != nil {
		return fmt.Errorf("save baseline %q: %w", path, err)
	}
	return nil
}

func writeFile(w io.Writer, kind uint16, payload []byte) error {
	var hdr [headerSize]byte
	copy(hdr[:], magic)
	binary.LittleEndian.PutUint16(hdr[8:], FormatVersion)
	binary.LittleEndian.PutUint16(hdr[10:], kind)
	binary.LittleEndian.PutUint64(hdr[16:], uint64(len(payload)))
	h := sha256.New()
	h.Write(hdr[:])
	h.Write(payload)
	for _, b := range [][]byte{hdr[:], payload, h.Sum(nil)} {
		if _, err := w.Write(b); err != nil {
			return err
		}
	}
	return nil
}

// readFile reads a baseline file of the kind and returns its payload and
// format version (1..FormatVersion).
func readFile(r io.Reader, kind uint16) ([]byte, int, error) {
	var hdr [headerSize]byte
	if _, err := io.ReadFull(r, hdr[:]); err != nil {
		return nil, 0, fmt.Errorf("%w: header: %v", ErrCorrupt, err)
	}
	if string(hdr[:8]) != magic {
		return nil, 0, fmt.Errorf("%w: not a weft baseline file", ErrCorrupt)
	}
	version := binary.LittleEndian.Uint16(hdr[8:])
	if version > FormatVersion {
		return nil, 0, fmt.Errorf("format version %d newer than supported %d", version, FormatVersion)
	}
	if version < 1 {
		return nil, 0, fmt.Errorf("%w: format version %d", ErrCorrupt, version)
	}
	if k := binary.LittleEndian.Uint16(hdr[10:]); k != kind {
		names := map[uint16]string{kindCounts: "n-gram counts", kindHMM: "a hidden Markov model"}
		if n, ok := names[k]; ok {
			return nil, 0, fmt.Errorf("file holds %s, not %s", n, names[kind])
		}
		return nil, 0, fmt.Errorf("%w: unknown kind %d", ErrCorrupt, k)
	}
	size := binary.LittleEndian.Uint64(hdr[16:])
	var buf bytes.Buffer
	// Read what is there rather than trusting the size for an allocation.
	if _, err := io.Copy(&buf, io.LimitReader(r, int64(min(size, math.MaxInt64-64))+sha256.Size+1)); err != nil {
		return nil, 0, err
	}
	data := buf.Bytes()
	if uint64(len(data)) != size+sha256.Size {
		return nil, 0, fmt.Errorf("%w: %d bytes after the header, want %d", ErrCorrupt, len(data), size+sha256.Size)
	}
	h := sha256.New()
	h.Write(hdr[:])
	h.Write(data[:size])
	if !bytes.Equal(h.Sum(nil), data[size:]) {
		return nil, 0, fmt.Errorf("%w: checksum mismatch", ErrCorrupt)
	}
	return data[:size], int(version), nil
}

// decoder reads unsigned varints from a payload, remembering the first
// error.
type decoder struct {
	buf []byte
	err error
}

// int reads a varint that must lie in 0..max.
func (d *decoder) int(max int) int {
	if d.err != nil {
		return 0
	}
	v, n := binary.Uvarint(d.buf)
	if n <= 0 {
		d.err = fmt.Errorf("%w: truncated payload", ErrCorrupt)
		return 0
	}
	d.buf = d.buf[n:]
	if v > uint64(max) {
		d.err = fmt.Errorf("%w: value %d above %d", ErrCorrupt, v, max)
		return 0
	}
	return int(v)
}
