package checkpoint

import (
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"runtime"
	"testing"
)

// smallCheckpoint is the file the damage tests cut and flip.
func smallCheckpoint(t testing.TB) []byte {
	t.Helper()
	b, err := Encode(sampleFile())
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// decodeNoPanic runs Decode and turns a panic into a test failure.
func decodeNoPanic(t *testing.T, what string, b []byte) (err error) {
	t.Helper()
	defer func() {
		if r := recover(); r != nil {
			t.Fatalf("%s: Decode panicked: %v", what, r)
		}
	}()
	_, err = Decode(b)
	return err
}

func TestTruncationEveryOffset(t *testing.T) {
	b := smallCheckpoint(t)
	for n := 0; n < len(b); n++ {
		err := decodeNoPanic(t, "truncated", b[:n])
		if !errors.Is(err, ErrCorrupt) {
			t.Fatalf("truncated to %d of %d bytes: got %v, want ErrCorrupt", n, len(b), err)
		}
	}
}

// TestTruncatedFileLoad checks the on-disk path too, at a few cut points:
// inside the length field, the header and the data.
func TestTruncatedFileLoad(t *testing.T) {
	b := smallCheckpoint(t)
	dir := t.TempDir()
	for _, n := range []int{0, 3, 8, 9, 40, len(b) - 1} {
		p := filepath.Join(dir, "cut.safetensors")
		if err := os.WriteFile(p, b[:n], 0o644); err != nil {
			t.Fatal(err)
		}
		if _, err := Load(p); !errors.Is(err, ErrCorrupt) {
			t.Errorf("Load of %d of %d bytes: got %v, want ErrCorrupt", n, len(b), err)
		}
	}
}

func TestBitFlips(t *testing.T) {
	b := smallCheckpoint(t)
	end := 8 + int(binary.LittleEndian.Uint64(b))
	var offsets []int
	for i := range end { // every byte of the length field and the header
		offsets = append(offsets, i)
	}
	for i := end; i < len(b); i += 7 { // sampled in the data
		offsets = append(offsets, i)
	}
	offsets = append(offsets, len(b)-1)
	flipped := make([]byte, len(b))
	for _, off := range offsets {
		for bit := range 8 {
			copy(flipped, b)
			flipped[off] ^= 1 << bit
			err := decodeNoPanic(t, "flipped", flipped)
			if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("bit %d of byte %d flipped (header ends at %d): got %v, want ErrCorrupt", bit, off, end, err)
			}
		}
	}
}

// TestHugeHeaderNoAllocation checks that a length field claiming 2^60
// bytes is refused without allocating anything near that size, through
// both Decode and Load.
func TestHugeHeaderNoAllocation(t *testing.T) {
	const limit = 1 << 20 // far below the claim; the test's own garbage is a few KB
	b := binary.LittleEndian.AppendUint64(nil, 1<<60)
	b = append(b, `{"a":{}}`...)
	p := filepath.Join(t.TempDir(), "huge.safetensors")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		run  func() error
	}{
		{"Decode", func() error { _, err := Decode(b); return err }},
		{"Load", func() error { _, err := Load(p); return err }},
		{"Decode below cap", func() error {
			c := binary.LittleEndian.AppendUint64(nil, MaxHeaderBytes)
			_, err := Decode(append(c, b[8:]...))
			return err
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var before, after runtime.MemStats
			runtime.ReadMemStats(&before)
			err := tc.run()
			runtime.ReadMemStats(&after)
			if !errors.Is(err, ErrCorrupt) {
				t.Errorf("got %v, want ErrCorrupt", err)
			}
			if got := after.TotalAlloc - before.TotalAlloc; got > limit {
				t.Errorf("allocated %d bytes, want at most %d", got, limit)
			}
		})
	}
}
