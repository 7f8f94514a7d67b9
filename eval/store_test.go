package eval

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func smallCounts(t *testing.T) (*Counts, []int) {
	t.Helper()
	rng := rand.New(rand.NewPCG(3, 3))
	seq := make([]int, 400)
	for i := range seq {
		seq[i] = rng.IntN(5)
	}
	c, err := CountNGrams(seq, 6, 3, 4, nil)
	if err != nil {
		t.Fatal(err)
	}
	return c, seq
}

func TestCountsRoundTrip(t *testing.T) {
	c, seq := smallCounts(t)
	path := filepath.Join(t.TempDir(), "counts.bin")
	if err := SaveCounts(path, c); err != nil {
		t.Fatal(err)
	}
	back, err := LoadCounts(path)
	if err != nil {
		t.Fatal(err)
	}
	if back.Events() != c.Events() || back.Contexts() != c.Contexts() || back.Tokens() != c.Tokens() || back.Boundary() != 4 {
		t.Fatalf("loaded counts: %d events, %d contexts, %d tokens; want %d, %d, %d",
			back.Events(), back.Contexts(), back.Tokens(), c.Events(), c.Contexts(), c.Tokens())
	}
	// Every model rebuilt from the loaded counts scores like the original.
	for _, s := range allSmoothings {
		a, _ := NewNGram(c, 3, s)
		b, _ := NewNGram(back, 3, s)
		la, lb := make([]float64, len(seq)), make([]float64, len(seq))
		a.LogProbs(context.Background(), la, seq)
		b.LogProbs(context.Background(), lb, seq)
		for i := range la {
			if la[i] != lb[i] && !(la[i] != la[i] && lb[i] != lb[i]) {
				t.Fatalf("%s position %d: original %g, loaded %g", a.Name(), i, la[i], lb[i])
			}
		}
	}
	if entries, _ := os.ReadDir(filepath.Dir(path)); len(entries) != 1 {
		t.Errorf("save left %d files in the folder, want 1", len(entries))
	}
}

func TestHMMRoundTrip(t *testing.T) {
	_, seq := smallCounts(t)
	h, err := TrainHMM(context.Background(), seq, 6, HMMOptions{States: 3, MaxIterations: 3, Seed: 1, Boundary: 4})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hmm.bin")
	if err := SaveHMM(path, h); err != nil {
		t.Fatal(err)
	}
	back, err := LoadHMM(path)
	if err != nil {
		t.Fatal(err)
	}
	la, lb := make([]float64, len(seq)), make([]float64, len(seq))
	h.LogProbs(context.Background(), la, seq)
	back.LogProbs(context.Background(), lb, seq)
	for i := range la {
		if la[i] != lb[i] {
			t.Fatalf("position %d: original %g, loaded %g", i, la[i], lb[i])
		}
	}
	if len(back.LogLik) != len(h.LogLik) {
		t.Errorf("log-likelihood history: got %d values, want %d", len(back.LogLik), len(h.LogLik))
	}
	if _, err := LoadCounts(path); err == nil {
		t.Error("loading an HMM file as counts gave no error")
	}
}

func TestDamagedFiles(t *testing.T) {
	c, _ := smallCounts(t)
	var cb bytes.Buffer
	if err := WriteCounts(&cb, c); err != nil {
		t.Fatal(err)
	}
	h, _ := NewHMM([]float64{.5, .5}, []float64{.9, .1, .2, .8}, []float64{.3, .7, .6, .4}, 2, 2)
	var hb bytes.Buffer
	if err := WriteHMM(&hb, h); err != nil {
		t.Fatal(err)
	}
	files := []struct {
		name string
		data []byte
		read func([]byte) error
	}{
		{"counts", cb.Bytes(), func(b []byte) error { _, err := ReadCounts(bytes.NewReader(b)); return err }},
		{"hmm", hb.Bytes(), func(b []byte) error { _, err := ReadHMM(bytes.NewReader(b)); return err }},
	}
	for _, f := range files {
		if err := f.read(f.data); err != nil {
			t.Fatalf("%s: intact file: %v", f.name, err)
		}
		// Every flipped byte and every truncation is an error (a panic
		// would fail the test); outside the version and kind fields it
		// wraps ErrCorrupt.
		for i := range f.data {
			b := bytes.Clone(f.data)
			b[i] ^= 0x41
			err := f.read(b)
			if err == nil {
				t.Fatalf("%s: byte %d flipped: no error", f.name, i)
			}
			if (i < 8 || i >= 12) && !errors.Is(err, ErrCorrupt) {
				t.Fatalf("%s: byte %d flipped: %v does not wrap ErrCorrupt", f.name, i, err)
			}
		}
		for n := range len(f.data) {
			if err := f.read(f.data[:n]); !errors.Is(err, ErrCorrupt) {
				t.Fatalf("%s: truncated to %d bytes: got %v, want ErrCorrupt", f.name, n, err)
			}
		}
	}
}

// FuzzReadPayload feeds arbitrary payloads with a valid checksum to the
// decoders: whatever the bytes, they must return an error or a model,
// never panic.
func FuzzReadPayload(f *testing.F) {
	rng := rand.New(rand.NewPCG(3, 3))
	seq := make([]int, 60)
	for i := range seq {
		seq[i] = rng.IntN(4)
	}
	c, _ := CountNGrams(seq, 4, 3, NoBoundary, nil)
	var b bytes.Buffer
	WriteCounts(&b, c)
	f.Add(b.Bytes()[headerSize:b.Len()-32], uint8(kindCounts))
	sub, _ := CountNGramsOf(IntTokens(seq), 4, 3, NoBoundary, CountOptions{Memory: 900, piece: 16}) // counts of a subset: the split's size follows the events
	b.Reset()
	WriteCounts(&b, sub)
	f.Add(b.Bytes()[headerSize:b.Len()-32], uint8(kindCounts))
	h, _ := NewHMM([]float64{.5, .5}, []float64{.9, .1, .2, .8}, []float64{.3, .7, .6, .4}, 2, 2)
	b.Reset()
	WriteHMM(&b, h)
	f.Add(b.Bytes()[headerSize:b.Len()-32], uint8(kindHMM))
	f.Fuzz(func(t *testing.T, payload []byte, kind uint8) {
		var file bytes.Buffer
		k := uint16(kind%2 + 1)
		writeFile(&file, k, payload)
		if k == kindCounts {
			if c, err := ReadCounts(&file); err == nil {
				m, err := NewNGram(c, c.Order(), Smoothing{Method: ModifiedKneserNey})
				if err == nil && c.VocabSize() <= 1<<12 {
					m.Distribution(make([]float64, c.VocabSize()), nil)
				}
			}
		} else if h, err := ReadHMM(&file); err == nil {
			h.LogProbs(context.Background(), make([]float64, 1), []int{0})
		}
	})
}

// withVersion returns a copy of the baseline file b with its format
// version set to v and the checksum made right again.
func withVersion(b []byte, v uint16) []byte {
	out := append([]byte(nil), b...)
	binary.LittleEndian.PutUint16(out[8:], v)
	sum := sha256.Sum256(out[:len(out)-sha256.Size])
	copy(out[len(out)-sha256.Size:], sum[:])
	return out
}

// TestStoreVersion1: counts files of format version 1 still load (their
// layout did not change); HMM files of version 1, whose uniform emission
// floor mispriced unseen symbols (issue 11), are refused with ErrStaleHMM
// so that a cache of them is fitted again.
func TestStoreVersion1(t *testing.T) {
	train := []int{0, 1, 2, 1, 0, 2, 2, 1}
	c, err := CountNGrams(train, 3, 2, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteCounts(&buf, c); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadCounts(bytes.NewReader(withVersion(buf.Bytes(), 1))); err != nil {
		t.Errorf("counts of version 1: %v", err)
	}
	h, err := TrainHMM(context.Background(), train, 3, HMMOptions{States: 2, MaxIterations: 2, Boundary: NoBoundary})
	if err != nil {
		t.Fatal(err)
	}
	buf.Reset()
	if err := WriteHMM(&buf, h); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadHMM(bytes.NewReader(withVersion(buf.Bytes(), 1))); !errors.Is(err, ErrStaleHMM) {
		t.Errorf("HMM of version 1: got %v, want ErrStaleHMM", err)
	}
	if _, err := ReadHMM(bytes.NewReader(withVersion(buf.Bytes(), FormatVersion+1))); err == nil || !strings.Contains(err.Error(), "newer") {
		t.Errorf("HMM of a newer version: got %v", err)
	}
}
