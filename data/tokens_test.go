package data

import (
	"encoding/binary"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

// TestTokensForms checks the three forms of Tokens against the ids they
// hold: in memory, packed (2 and 4 bytes an id, as the cache stores them,
// also mapped from a file) and read from a file window by window (the
// fallback where mapping is unavailable), through every method.
func TestTokensForms(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, width := range []int{2, 4} {
		n := 3*tokenReadChunk/width + 17 // the file fallback reads in several pieces
		ids := make([]int, n)
		for i := range ids {
			ids[i] = rng.IntN(1 << (8 * min(width, 3)))
		}
		packed := make([]byte, 0, 8+n*width)
		packed = append(packed, "headpad!"...) // the ids start at an offset, as in the cache
		for _, id := range ids {
			if width == 2 {
				packed = binary.LittleEndian.AppendUint16(packed, uint16(id))
			} else {
				packed = binary.LittleEndian.AppendUint32(packed, uint32(id))
			}
		}
		path := filepath.Join(t.TempDir(), "ids")
		if err := os.WriteFile(path, packed, 0o644); err != nil {
			t.Fatal(err)
		}
		f, err := os.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		forms := map[string]*Tokens{
			"memory": NewTokens(slices.Clone(ids)),
			"packed": packedTokens(packed[8:], width, n),
			"file":   {n: n, width: width, r: f, off: 8, name: path},
		}
		if b, err := mapFile(f, int64(len(packed))); err == nil {
			m := &mapping{f: f, b: b}
			defer unmapFile(b)
			forms["mapped"] = &Tokens{n: n, width: width, b: b[8:], m: m}
		} else {
			t.Logf("no mapping here (%v): the mapped form is not checked", err)
		}
		for name, tk := range forms {
			if tk.Len() != n || !slices.Equal(tk.Ints(), ids) {
				t.Fatalf("width %d, %s: Ints differ", width, name)
			}
			for _, i := range []int{0, 1, n / 2, n - 1} {
				if tk.At(i) != ids[i] {
					t.Errorf("width %d, %s: At(%d) = %d, want %d", width, name, i, tk.At(i), ids[i])
				}
			}
			for _, w := range [][2]int{{0, 0}, {5, 70}, {n - 300, n}, {100, 100 + n/2}} {
				dst := make([]int, w[1]-w[0])
				tk.Read(dst, w[0])
				if !slices.Equal(dst, ids[w[0]:w[1]]) {
					t.Errorf("width %d, %s: Read [%d,%d) differs", width, name, w[0], w[1])
				}
				if got := tk.Slice(w[0], w[1]).Ints(); !slices.Equal(got, ids[w[0]:w[1]]) {
					t.Errorf("width %d, %s: Slice [%d,%d) differs", width, name, w[0], w[1])
				}
			}
			var got []int
			tk.Each(1000, func(off int, w []int) error {
				if off != len(got) || len(w) > 1000 {
					t.Fatalf("width %d, %s: window at %d of %d ids after %d", width, name, off, len(w), len(got))
				}
				got = append(got, w...)
				return nil
			})
			if !slices.Equal(got, ids) {
				t.Errorf("width %d, %s: Each differs", width, name)
			}
		}
	}
	if NewTokens(nil).Len() != 0 || NewTokens(nil).Ints() != nil {
		t.Error("empty tokens are not empty")
	}
	NewTokens(nil).Read(nil, 0)
}
