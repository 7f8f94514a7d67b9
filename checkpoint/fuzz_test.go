package checkpoint

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"
)

// FuzzDecode checks that no input makes the decoders panic, that every
// failure wraps ErrCorrupt or ErrVersion, that anything DecodeSafetensors
// accepts tiles its buffer, and that anything Decode accepts re-encodes to
// exactly the same bytes. Seeds: testdata/fuzz/FuzzDecode (written by
// TestFuzzCorpus with -update).
func FuzzDecode(f *testing.F) {
	for _, s := range fuzzSeeds(f) {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		in := bytes.Clone(data)
		raw, err := DecodeSafetensors(data)
		if err != nil && !errors.Is(err, ErrCorrupt) {
			t.Fatalf("DecodeSafetensors: error %v does not wrap ErrCorrupt", err)
		}
		if err == nil {
			total := 0
			for i := range raw.Tensors {
				tn := &raw.Tensors[i]
				if tn.NumElements()*tn.DType.Size() != len(tn.Data) {
					t.Fatalf("tensor %q: %d bytes for %v %v", tn.Name, len(tn.Data), tn.DType, tn.Shape)
				}
				total += len(tn.Data)
			}
			if buf := len(data) - 8 - int(binary.LittleEndian.Uint64(data)); total != buf {
				t.Fatalf("tensors hold %d bytes, want the whole %d-byte data buffer", total, buf)
			}
		}
		ck, err := Decode(data)
		if !bytes.Equal(in, data) {
			t.Fatal("Decode modified its input")
		}
		if err != nil {
			if !errors.Is(err, ErrCorrupt) && !errors.Is(err, ErrVersion) {
				t.Fatalf("Decode: error %v wraps neither ErrCorrupt nor ErrVersion", err)
			}
			return
		}
		out, err := Encode(ck)
		if err != nil {
			t.Fatalf("decoded file does not re-encode: %v", err)
		}
		if !bytes.Equal(out, data) {
			t.Fatalf("re-encoding gave different bytes (%d vs %d)", len(out), len(data))
		}
	})
}

// fuzzSeeds are valid and nearly valid inputs.
func fuzzSeeds(t testing.TB) [][]byte {
	t.Helper()
	var seeds [][]byte
	for _, f := range []*File{sampleFile(), fixtureV1(), {}, {Tensors: []Tensor{NewUint8("model.x", []int{1}, []uint8{1})}}} {
		b, err := Encode(f)
		if err != nil {
			t.Fatal(err)
		}
		seeds = append(seeds, b, b[:len(b)-1])
	}
	ref, err := os.ReadFile(filepath.Join("testdata", "interop", "reference.safetensors"))
	if err != nil {
		t.Fatal(err)
	}
	return append(seeds, ref, rawSafetensors(`{"a":{"dtype":"F32","shape":[1],"data_offsets":[0,4]}}`, make([]byte, 4)))
}

// TestFuzzCorpus writes the seeds to testdata/fuzz/FuzzDecode with -update,
// and otherwise checks that the corpus is there.
func TestFuzzCorpus(t *testing.T) {
	dir := filepath.Join("testdata", "fuzz", "FuzzDecode")
	if *update {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for _, s := range fuzzSeeds(t) {
			sum := sha256.Sum256(s)
			name := filepath.Join(dir, fmt.Sprintf("seed-%x", sum[:8]))
			if err := os.WriteFile(name, fmt.Appendf(nil, "go test fuzz v1\n[]byte(%q)\n", s), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	ents, err := os.ReadDir(dir)
	if err != nil || len(ents) < len(fuzzSeeds(t)) {
		t.Errorf("fuzz corpus %s: %d files (%v), want at least %d", dir, len(ents), err, len(fuzzSeeds(t)))
	}
}

// FuzzRoundTrip builds a checkpoint from fuzzed names, metadata and bytes
// and checks that whatever Encode accepts decodes to the same content and
// re-encodes to the same bytes.
func FuzzRoundTrip(f *testing.F) {
	f.Add("model.w", "config", `{"a":1}`, uint8(F32), []byte{0, 0, 128, 63, 1, 2, 3, 4})
	f.Add("optim.\u00e9<&>", "k\"\\", "\u2028", uint8(U8), []byte{})
	f.Add("__metadata__", "weft.x", "", uint8(F64), make([]byte, 16))
	f.Fuzz(func(t *testing.T, name, key, val string, dt uint8, data []byte) {
		d := DType(dt%uint8(numDTypes-1)) + 1
		data = data[:len(data)/d.Size()*d.Size()]
		n := len(data) / d.Size()
		shape := []int{n}
		if n%2 == 0 && n > 0 {
			shape = []int{2, n / 2}
		}
		in := &File{
			Meta: map[string]string{key: val},
			Tensors: []Tensor{
				{Name: name, DType: d, Shape: shape, Data: data},
				NewFloat32(name+".b", []int{}, []float32{1}),
			},
		}
		b, err := Encode(in)
		if err != nil {
			return // invalid names or keys: Encode says why
		}
		out, err := Decode(b)
		if err != nil {
			t.Fatalf("Decode of Encode output: %v", err)
		}
		in.Version = CurrentVersion
		equalFiles(t, out, in)
		again, err := Encode(out)
		if err != nil || !bytes.Equal(again, b) {
			t.Fatalf("re-encode: %v, equal %v", err, bytes.Equal(again, b))
		}
	})
}
