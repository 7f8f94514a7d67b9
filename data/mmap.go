package data

import (
	"fmt"
	"os"
	"sync/atomic"
)

// A mapping is a token cache file mapped read-only into memory, or, where
// mapping is unavailable, the open file the splits read window by window.
type mapping struct {
	f *os.File
	b []byte // nil when not mapped

	// touched counts the bytes read through the map since the last
	// release. Pages of a mapped file that a process has read count in its
	// resident memory until it gives them back, so a reader of a split
	// larger than memory gives them back every releaseBytes (they stay in
	// the page cache, ready for the next read).
	touched atomic.Int64
}

// releaseBytes is how much of a mapped cache a process reads between
// giving the pages back.
const releaseBytes = 64 << 20

// read notes that n bytes of the map were read.
func (m *mapping) read(n int) {
	if m.touched.Add(int64(n)) >= releaseBytes {
		m.touched.Store(0)
		releasePages(m.b)
	}
}

// attach opens the splits of ds on the cache file f, whose layout scanCache
// found: mapped where the system allows, read through f otherwise. The
// dataset owns f from here on (Dataset.Close releases it).
func (lay cacheLayout) attach(ds *Dataset, f *os.File, path string) error {
	fi, err := f.Stat()
	if err != nil {
		return err
	}
	if fi.Size() != lay.size {
		return fmt.Errorf("%w: the file changed while it was checked (%d bytes, then %d)", ErrCorrupt, lay.size, fi.Size())
	}
	m := &mapping{f: f}
	if b, err := mapFile(f, lay.size); err == nil {
		m.b = b
	}
	for i, s := range ds.Splits() {
		t := &Tokens{n: lay.n[i], width: lay.width, m: m, name: path}
		if m.b != nil {
			t.b = m.b[lay.at[i] : lay.at[i]+int64(lay.n[i]*lay.width)]
		} else {
			t.r, t.off = f, lay.at[i]
		}
		s.Tokens = t
	}
	ds.closer = m
	return nil
}

// close unmaps the file and closes it.
func (m *mapping) close() error {
	var err error
	if m.b != nil {
		err = unmapFile(m.b)
		m.b = nil
	}
	if cerr := m.f.Close(); err == nil {
		err = cerr
	}
	return err
}
