package eval

// TokenReader is how the fitting code reads a training split: its length
// and copies of windows of its ids. The baselines read a split a window
// at a time (readWindow tokens) and never hold a copy of the whole of it,
// so a split larger than memory (a memory-mapped token cache, say; a
// *data.Tokens satisfies TokenReader) costs the bytes of one window. Read
// sets dst[j] to token off+j; it may panic on a range outside [0, Len()).
type TokenReader interface {
	Len() int
	Read(dst []int, off int)
}

// IntTokens is a TokenReader over ids already in memory.
type IntTokens []int

// Len is len(t).
func (t IntTokens) Len() int { return len(t) }

// Read copies t[off:off+len(dst)] into dst.
func (t IntTokens) Read(dst []int, off int) { copy(dst, t[off:off+len(dst)]) }

// readWindow is how many tokens the fitting code reads from a TokenReader
// at once: 512 KiB of ids.
const readWindow = 1 << 16

// eachWindow calls f with the tokens [from, to) of r in order, in windows
// of at most readWindow tokens, each with the position of its first token;
// it stops at the first error f returns. The window is reused between
// calls (for IntTokens it is the ids themselves): f must not keep or
// modify it.
func eachWindow(r TokenReader, from, to int, f func(off int, ids []int) error) error {
	if ints, ok := r.(IntTokens); ok {
		for off := from; off < to; off += readWindow {
			if err := f(off, ints[off:min(off+readWindow, to)]); err != nil {
				return err
			}
		}
		return nil
	}
	buf := make([]int, min(readWindow, max(to-from, 0)))
	for off := from; off < to; off += readWindow {
		w := buf[:min(readWindow, to-off)]
		r.Read(w, off)
		if err := f(off, w); err != nil {
			return err
		}
	}
	return nil
}

// readPrefix returns the first n tokens of r (all of them when n is 0 or
// more than r.Len()) as a slice: the ids themselves for IntTokens, a copy
// of 8 bytes a token otherwise.
func readPrefix(r TokenReader, n int) []int {
	if n <= 0 || n > r.Len() {
		n = r.Len()
	}
	if ints, ok := r.(IntTokens); ok {
		return ints[:n]
	}
	out := make([]int, n)
	eachWindow(r, 0, n, func(off int, ids []int) error {
		copy(out[off:], ids)
		return nil
	})
	return out
}

// TokenCountsOf is TokenCounts over the tokens of r, read window by window.
func TokenCountsOf(r TokenReader, vocab int) []int {
	c := make([]int, vocab)
	eachWindow(r, 0, r.Len(), func(_ int, ids []int) error {
		for _, w := range ids {
			if w >= 0 && w < vocab {
				c[w]++
			}
		}
		return nil
	})
	return c
}
