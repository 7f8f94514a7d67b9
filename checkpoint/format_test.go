package checkpoint

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"math"
	"reflect"
	"strconv"
	"strings"
	"testing"
)

// sampleFile is a small checkpoint with every typed dtype, a scalar, an
// empty tensor and metadata that needs JSON escaping.
func sampleFile() *File {
	return &File{
		Meta: map[string]string{
			"config":  `{"cell":"lstm","hidden_size":4}`,
			"vocab":   "ab\n\"<&>\u00e9\u2028",
			"trainer": `{"step":12}`,
		},
		Tensors: []Tensor{
			NewFloat32("model.w", []int{2, 3}, []float32{1, -2, 3.5, float32(math.Inf(1)), 0, -0.25}),
			NewFloat64("optim.m.model.w", []int{2, 3}, []float64{math.Pi, -1e-300, 0, 1, 2, 3}),
			NewInt32("state.i32", []int{3}, []int32{math.MinInt32, 0, math.MaxInt32}),
			NewInt64("state.rng", []int{2}, []int64{math.MinInt64, math.MaxInt64}),
			NewUint8("state.bytes", []int{5}, []uint8{0, 1, 127, 128, 255}),
			NewFloat32("model.scalar", []int{}, []float32{7}),
			NewFloat32("model.empty", []int{0, 4}, nil),
		},
	}
}

// equalFiles compares content: version, metadata and tensors by name.
func equalFiles(t *testing.T, got, want *File) {
	t.Helper()
	if got.Version != want.Version {
		t.Errorf("got version %d, want %d", got.Version, want.Version)
	}
	if len(got.Meta) != len(want.Meta) {
		t.Errorf("got %d metadata keys %v, want %d", len(got.Meta), got.Meta, len(want.Meta))
	}
	for k, v := range want.Meta {
		if got.Meta[k] != v {
			t.Errorf("metadata %q: got %q, want %q", k, got.Meta[k], v)
		}
	}
	if len(got.Tensors) != len(want.Tensors) {
		t.Fatalf("got %d tensors, want %d", len(got.Tensors), len(want.Tensors))
	}
	for _, w := range want.Tensors {
		g := got.Tensor(w.Name)
		if g == nil {
			t.Errorf("tensor %q missing", w.Name)
			continue
		}
		if g.DType != w.DType || !reflect.DeepEqual(cloneShape(g.Shape), cloneShape(w.Shape)) || !bytes.Equal(g.Data, w.Data) {
			t.Errorf("tensor %q: got %v %v %d bytes, want %v %v %d bytes", w.Name, g.DType, g.Shape, len(g.Data), w.DType, w.Shape, len(w.Data))
		}
	}
}

func TestRoundTrip(t *testing.T) {
	big := make([]float32, 1<<18)
	for i := range big {
		big[i] = float32(i) * 0.5
	}
	tests := []struct {
		name string
		file *File
	}{
		{"all dtypes", sampleFile()},
		{"zero tensors", &File{Meta: map[string]string{"k": "v"}}},
		{"nothing", &File{}},
		{"empty tensor only", &File{Tensors: []Tensor{NewInt64("model.none", []int{0}, nil)}}},
		{"zero dimension beside huge ones", &File{Tensors: []Tensor{NewFloat64("model.z", []int{1 << 40, 0, 1 << 40}, nil)}}},
		{"large shape", &File{Tensors: []Tensor{NewFloat32("model.big", []int{1 << 9, 1 << 9}, big)}}},
		{"raw dtypes", &File{Tensors: []Tensor{
			{Name: "model.h", DType: F16, Shape: []int{2}, Data: []byte{0, 0x3c, 0, 0xc0}},
			{Name: "model.b", DType: BF16, Shape: []int{1}, Data: []byte{0x80, 0x3f}},
			{Name: "model.t", DType: BOOL, Shape: []int{2}, Data: []byte{1, 0}},
			{Name: "model.u", DType: U64, Shape: []int{1}, Data: []byte{1, 2, 3, 4, 5, 6, 7, 8}},
		}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, err := Encode(tc.file)
			if err != nil {
				t.Fatalf("encode: %v", err)
			}
			got, err := Decode(b)
			if err != nil {
				t.Fatalf("decode: %v", err)
			}
			want := *tc.file
			want.Version = CurrentVersion
			if want.Meta == nil {
				want.Meta = map[string]string{}
			}
			equalFiles(t, got, &want)
			again, err := Encode(got)
			if err != nil {
				t.Fatalf("re-encode: %v", err)
			}
			if !bytes.Equal(again, b) {
				t.Errorf("re-encoding gave different bytes (%d vs %d)", len(again), len(b))
			}
			// The header is padded so that the data buffer starts on an
			// 8-byte boundary (package doc, byte layout).
			if n := binary.LittleEndian.Uint64(b); (8+n)%8 != 0 {
				t.Errorf("got header end %d, want a multiple of 8", 8+n)
			}
		})
	}
}

// TestEncodeDeterministic checks that the tensor order given and map
// iteration order do not change the bytes.
func TestEncodeDeterministic(t *testing.T) {
	a := sampleFile()
	b := sampleFile()
	for i, j := 0, len(b.Tensors)-1; i < j; i, j = i+1, j-1 {
		b.Tensors[i], b.Tensors[j] = b.Tensors[j], b.Tensors[i]
	}
	want, err := Encode(a)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 20 {
		got, err := Encode(b)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Fatalf("encode %d: bytes differ", i)
		}
	}
	if b.Tensors[0].Name != "model.empty" {
		t.Errorf("Encode reordered the caller's tensors: first is %q", b.Tensors[0].Name)
	}
}

// TestChecksumDefinition recomputes the checksum as the package doc
// defines it, independently of Decode.
func TestChecksumDefinition(t *testing.T) {
	b, err := Encode(sampleFile())
	if err != nil {
		t.Fatal(err)
	}
	key := []byte(`"` + MetaChecksum + `":"`)
	at := bytes.Index(b, key)
	if at < 0 {
		t.Fatalf("no %s in header", key)
	}
	at += len(key)
	stored := string(b[at : at+64])
	zeroed := bytes.Clone(b)
	copy(zeroed[at:], strings.Repeat("0", 64))
	sum := sha256.Sum256(zeroed)
	if got := hex.EncodeToString(sum[:]); got != stored {
		t.Errorf("got checksum %s, want %s (SHA-256 with the digits zeroed)", stored, got)
	}
}

func TestEncodeErrors(t *testing.T) {
	good := NewFloat32("model.w", []int{1}, []float32{1})
	tests := []struct {
		name string
		file *File
		want string
	}{
		{"reserved meta", &File{Meta: map[string]string{"weft.x": ""}}, "reserved prefix"},
		{"bad utf8 meta", &File{Meta: map[string]string{"k": "\xff"}}, "UTF-8"},
		{"duplicate", &File{Tensors: []Tensor{good, good}}, "two tensors"},
		{"empty name", &File{Tensors: []Tensor{{DType: F32, Shape: []int{0}}}}, "empty name"},
		{"metadata name", &File{Tensors: []Tensor{{Name: "__metadata__", DType: F32, Shape: []int{0}}}}, "reserved"},
		{"bad dtype", &File{Tensors: []Tensor{{Name: "x", Shape: []int{0}}}}, "invalid dtype"},
		{"negative dim", &File{Tensors: []Tensor{{Name: "x", DType: U8, Shape: []int{-1}}}}, "invalid shape"},
		{"short data", &File{Tensors: []Tensor{{Name: "x", DType: F32, Shape: []int{2}, Data: make([]byte, 7)}}}, "data bytes"},
		{"future version", &File{Version: MaxVersion + 1}, "format version"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Encode(tc.file)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got error %v, want one containing %q", err, tc.want)
			}
		})
	}
}

// rawSafetensors assembles a safetensors file from a header and data,
// without padding, as a hand-made test input.
func rawSafetensors(header string, data []byte) []byte {
	b := binary.LittleEndian.AppendUint64(nil, uint64(len(header)))
	b = append(b, header...)
	return append(b, data...)
}

func TestDecodeSafetensorsErrors(t *testing.T) {
	f32 := make([]byte, 8)
	tests := []struct {
		name string
		in   []byte
		want string
	}{
		{"empty", nil, "truncated"},
		{"short length", []byte{1, 0, 0}, "truncated"},
		{"huge header", binary.LittleEndian.AppendUint64(nil, 1<<60), "not a safetensors file: its first 8 bytes give a header length of 1152921504606846976, beyond the 104857600-byte limit"}, // issue 12
		{"header past end", binary.LittleEndian.AppendUint64(nil, 100), "truncated"},
		{"tiny header", rawSafetensors("{", nil), "too short"},
		{"not object", rawSafetensors(`[1,2]`, nil), "start with '{'"},
		{"bad json", rawSafetensors(`{"a":`, nil), "not valid JSON"},
		{"meta not strings", rawSafetensors(`{"__metadata__":{"a":1}}`, nil), "strings to strings"},
		{"unknown dtype", rawSafetensors(`{"a":{"dtype":"Q7","shape":[],"data_offsets":[0,0]}}`, nil), "unknown dtype"},
		{"no shape", rawSafetensors(`{"a":{"dtype":"F32","data_offsets":[0,4]}}`, f32[:4]), "no shape"},
		{"one offset", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[0]}}`, f32[:4]), "two numbers"},
		{"negative dim", rawSafetensors(`{"a":{"dtype":"F32","shape":[-1],"data_offsets":[0,4]}}`, f32[:4]), "invalid dimension"},
		{"negative offset", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[-4,0]}}`, f32[:4]), "bad header entry"},
		{"unknown field", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[0,4],"x":1}}`, f32[:4]), "bad header entry"},
		{"reversed offsets", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[4,0]}}`, f32[:4]), "outside"},
		{"offset past buffer", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[0,12]}}`, f32), "outside"},
		{"span mismatch", rawSafetensors(`{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,4]}}`, f32[:4]), "different size"},
		{"overflowing shape", rawSafetensors(`{"a":{"dtype":"F64","shape":[4294967296,4294967296,4294967296],"data_offsets":[0,8]}}`, f32), "different size"},
		{"huge shape small span", rawSafetensors(`{"a":{"dtype":"U8","shape":[1152921504606846976],"data_offsets":[0,8]}}`, f32), "different size"},
		{"gap", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[4,8]}}`, f32), "gap of 4 bytes"},
		{"overlap", rawSafetensors(`{"a":{"dtype":"F32","shape":[2],"data_offsets":[0,8]},"b":{"dtype":"F32","shape":[],"data_offsets":[4,8]}}`, f32), "overlaps"},
		{"trailing bytes", rawSafetensors(`{"a":{"dtype":"F32","shape":[],"data_offsets":[0,4]}}`, f32), "cover 4 of the 8"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := DecodeSafetensors(tc.in)
			if !errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got error %v, want ErrCorrupt containing %q", err, tc.want)
			}
			_, err = Decode(tc.in)
			if !errors.Is(err, ErrCorrupt) {
				t.Errorf("Decode: got error %v, want ErrCorrupt", err)
			}
		})
	}
}

// TestDecodeSafetensorsLenient reads files in forms weft never writes:
// spaces in the JSON, tensors out of name order, padding, no metadata.
func TestDecodeSafetensorsLenient(t *testing.T) {
	data := binary.LittleEndian.AppendUint32(nil, math.Float32bits(1.5))
	data = binary.LittleEndian.AppendUint64(data, uint64(math.MaxInt64)) // I64 max
	hdr := `{ "z": {"shape": [], "dtype": "F32", "data_offsets": [0, 4]}, "a": {"dtype": "I64", "shape": [1], "data_offsets": [4, 12]} }    `
	f, err := DecodeSafetensors(rawSafetensors(hdr, data))
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Tensors) != 2 || f.Tensors[0].Name != "a" || f.Tensors[1].Name != "z" {
		t.Fatalf("got tensors %v, want a then z", f.Tensors)
	}
	v, err := f.Tensors[1].Float32s()
	if err != nil || len(v) != 1 || v[0] != 1.5 {
		t.Errorf("z: got %v %v, want [1.5]", v, err)
	}
	w, err := f.Tensors[0].Int64s()
	if err != nil || len(w) != 1 || w[0] != math.MaxInt64 {
		t.Errorf("a: got %v %v, want [%d]", w, err, int64(math.MaxInt64))
	}
	if _, err := Decode(rawSafetensors(hdr, data)); !errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), "not a weft checkpoint") {
		t.Errorf("Decode of a plain safetensors file: got %v, want ErrCorrupt saying it is not a weft checkpoint", err)
	}
}

// TestDecodeNonCanonical checks that Decode refuses a weft checkpoint whose
// header was rewritten, even with a checksum recomputed for the new bytes.
func TestDecodeNonCanonical(t *testing.T) {
	b, err := Encode(&File{Tensors: []Tensor{NewFloat32("model.w", []int{1}, []float32{1})}})
	if err != nil {
		t.Fatal(err)
	}
	// Swap the order of "shape" and "dtype": same content, other bytes.
	n := binary.LittleEndian.Uint64(b)
	hdr := string(b[8 : 8+n])
	alt := strings.Replace(hdr, `{"dtype":"F32","shape":[1],`, `{"shape":[1],"dtype":"F32",`, 1)
	if alt == hdr {
		t.Fatal("test header rewrite did not apply")
	}
	_, err = Decode(append(rawSafetensors(alt, nil), b[8+n:]...))
	if !errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), "canonical") {
		t.Errorf("got %v, want ErrCorrupt about the canonical form", err)
	}
}

func TestDecodeVersion(t *testing.T) {
	for _, tc := range []struct {
		version int
		want    string
	}{
		{MaxVersion + 1, "newer than supported"},
		{MinVersion - 1, "older than the oldest"},
		{1000, "newer than supported"},
	} {
		b := encodeVersion(t, tc.version)
		_, err := Decode(b)
		if !errors.Is(err, ErrVersion) || errors.Is(err, ErrCorrupt) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("version %d: got %v, want ErrVersion containing %q", tc.version, err, tc.want)
		}
	}
}

// encodeVersion writes a valid checkpoint claiming any version, as a newer
// or older weft would, by building the canonical header directly.
func encodeVersion(t *testing.T, version int) []byte {
	t.Helper()
	w := NewFloat32("model.w", []int{1}, []float32{2})
	meta := map[string]string{MetaVersion: strconv.Itoa(version), MetaChecksum: strings.Repeat("0", 64)}
	b, at := appendHeader(nil, meta, []*Tensor{&w})
	b = append(b, w.Data...)
	sum := sha256.Sum256(b)
	hex.Encode(b[at:], sum[:])
	return b
}

func TestAccessors(t *testing.T) {
	f32 := NewFloat32("a", []int{2}, []float32{1.25, -3})
	if got, err := f32.Float32s(); err != nil || !reflect.DeepEqual(got, []float32{1.25, -3}) {
		t.Errorf("Float32s: got %v %v, want [1.25 -3]", got, err)
	}
	// 1.25 is 0x3FA00000 in IEEE 754 binary32 (sign 0, exponent 127, mantissa 0x200000).
	if want := []byte{0, 0, 0xa0, 0x3f}; !bytes.Equal(f32.Data[:4], want) {
		t.Errorf("got bytes % x, want % x (little-endian 0x3fa00000)", f32.Data[:4], want)
	}
	if _, err := f32.Float64s(); err == nil || !strings.Contains(err.Error(), `"a" is F32, want F64`) {
		t.Errorf("Float64s on F32: got %v, want a dtype error", err)
	}
	if err := f32.ReadFloat32s(make([]float32, 3)); err == nil {
		t.Error("ReadFloat32s into a wrong-length destination: got nil error")
	}
	i32 := NewInt32("b", []int{1}, []int32{-2})
	if got, err := i32.Int32s(); err != nil || got[0] != -2 {
		t.Errorf("Int32s: got %v %v, want [-2]", got, err)
	}
	u8 := NewUint8("c", []int{2}, []uint8{9, 8})
	if got, err := u8.Uint8s(); err != nil || !reflect.DeepEqual(got, []uint8{9, 8}) {
		t.Errorf("Uint8s: got %v %v, want [9 8]", got, err)
	}
	f64 := NewFloat64("d", []int{1}, []float64{-0.5})
	if got, err := f64.Float64s(); err != nil || got[0] != -0.5 {
		t.Errorf("Float64s: got %v %v, want [-0.5]", got, err)
	}
	func() {
		defer func() {
			if recover() == nil {
				t.Error("NewFloat32 with a wrong length: got no panic")
			}
		}()
		NewFloat32("e", []int{3}, []float32{1})
	}()
}
