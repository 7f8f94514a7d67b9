package checkpoint

import (
	"bytes"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// -update rewrites the files this package's tests generate: the frozen
// fixture of the current version, the file the Python reader checks, and
// the fuzz seed corpus. Rewrite the fixture of a version only while that
// version is still unreleased; after that it is frozen.
var update = flag.Bool("update", false, "rewrite the generated files in testdata")

// fixtureV1 is the content of testdata/v1.safetensors, frozen with format
// version 1: tensors of both families and every typed dtype, and metadata
// shaped like the trainer's.
func fixtureV1() *File {
	return &File{
		Version: 1,
		Meta: map[string]string{
			"config":  `{"model":{"cell":"lstm","hidden_size":3,"embedding_size":2},"training":{"optimizer":"adam","seed":7}}`,
			"vocab":   `["a","b","\n"]`,
			"trainer": `{"step":1200,"epoch":2,"best_validation_bits":1.875}`,
		},
		Tensors: []Tensor{
			NewFloat32("model.embed", []int{3, 2}, []float32{0.5, -0.25, 1, 2, -3, 0.125}),
			NewFloat32("model.out.b", []int{3}, []float32{0, 1e-7, -1e7}),
			NewFloat64("optim.adam.m.model.embed", []int{3, 2}, []float64{1, 2, 3, 4, 5, 6}),
			NewInt64("state.rng", []int{4}, []int64{1, -1, math.MaxInt64, math.MinInt64}),
			NewInt32("state.cursor", []int{2}, []int32{17, -17}),
			NewUint8("state.flags", []int{3}, []uint8{0, 1, 255}),
			NewFloat32("state.empty", []int{0}, nil),
		},
	}
}

func TestFrozenFixtures(t *testing.T) {
	fixtures := map[int]func() *File{1: fixtureV1}
	for v := MinVersion; v <= MaxVersion; v++ {
		t.Run(fmt.Sprintf("v%d", v), func(t *testing.T) {
			want, ok := fixtures[v]
			if !ok {
				t.Fatalf("no frozen fixture for supported version %d", v)
			}
			p := filepath.Join("testdata", fmt.Sprintf("v%d.safetensors", v))
			if *update && v == CurrentVersion {
				if err := Save(p, want()); err != nil {
					t.Fatal(err)
				}
			}
			got, err := Load(p)
			if err != nil {
				t.Fatal(err)
			}
			equalFiles(t, got, want())
			// Today's encoder still writes the same bytes for this version.
			raw, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			again, err := Encode(got)
			if err != nil {
				t.Fatal(err)
			}
			if !bytes.Equal(again, raw) {
				t.Errorf("re-encoding %s gave different bytes", p)
			}
		})
	}
}

// TestReadReferenceFile reads a file written by an independent safetensors
// writer (testdata/interop/write_reference.py, json+struct only). The
// expected values are the ones listed in that script.
func TestReadReferenceFile(t *testing.T) {
	p := filepath.Join("testdata", "interop", "reference.safetensors")
	f, err := LoadSafetensors(p)
	if err != nil {
		t.Fatal(err)
	}
	if want := map[string]string{"format": "pt", "note": "written by write_reference.py"}; !reflect.DeepEqual(f.Meta, want) {
		t.Errorf("got metadata %v, want %v", f.Meta, want)
	}
	f32 := func(name string, shape []int, want []float32) {
		t.Helper()
		tn := f.Tensor(name)
		if tn == nil || !reflect.DeepEqual(tn.Shape, shape) {
			t.Fatalf("tensor %q: got %+v, want shape %v", name, tn, shape)
		}
		got, err := tn.Float32s()
		if err != nil {
			t.Fatal(err)
		}
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
				t.Errorf("%s[%d]: got %v, want %v", name, i, got[i], want[i])
			}
		}
		if len(got) != len(want) {
			t.Errorf("%s: got %d values, want %d", name, len(got), len(want))
		}
	}
	// struct.pack('<f', 1e-3) rounds to the nearest binary32, as Go's
	// float32(1e-3) conversion does; -0.0 keeps its sign bit.
	f32("weight", []int{2, 3}, []float32{0.5, -1.25, 3.0, 1e-3, float32(math.Copysign(0, -1)), 65504.0})
	f32("scalar", []int{}, []float32{42})
	f32("empty", []int{0, 3}, []float32{})
	if got, err := f.Tensor("bias").Float64s(); err != nil || !reflect.DeepEqual(got, []float64{3.141592653589793, -2.5e-300, 1e300}) {
		t.Errorf("bias: got %v %v", got, err)
	}
	if got, err := f.Tensor("steps").Int64s(); err != nil || !reflect.DeepEqual(got, []int64{-9007199254740993, 9223372036854775807}) {
		t.Errorf("steps: got %v %v", got, err)
	}
	if got, err := f.Tensor("ids").Int32s(); err != nil || !reflect.DeepEqual(got, []int32{-2147483648, -1, 0, 2147483647}) {
		t.Errorf("ids: got %v %v", got, err)
	}
	if got, err := f.Tensor("mask").Uint8s(); err != nil || !reflect.DeepEqual(got, []uint8{0, 1, 127, 128, 255}) {
		t.Errorf("mask: got %v %v", got, err)
	}
	// The strict reader refuses it: it has neither version nor checksum.
	if _, err := Load(p); err == nil || !strings.Contains(err.Error(), "not a weft checkpoint") {
		t.Errorf("Load of a plain safetensors file: got %v, want a not-a-weft-checkpoint error", err)
	}
}

// interopFile is what weft wrote to testdata/interop/weft_written.safetensors
// for the Python reader. Its values are exact in JSON (finite, and F32
// values that print the same as float64).
func interopFile() *File {
	return &File{
		Meta: map[string]string{"config": `{"cell":"gru"}`, "vocab": "<&>\u00e9"},
		Tensors: []Tensor{
			NewFloat32("model.w", []int{2, 2}, []float32{1.5, -2, 0.25, 1024}),
			NewFloat64("optim.v.model.w", []int{2, 2}, []float64{1e-8, 2, math.Pi, -7}),
			NewInt64("state.step", []int{}, []int64{1200}),
			NewInt32("state.cursor", []int{1}, []int32{-5}),
			NewUint8("state.bytes", []int{2}, []uint8{7, 200}),
			NewFloat32("model.none", []int{0, 2}, nil),
		},
	}
}

// TestPythonReadsOurFile checks testdata/interop/weft_written.json, the
// output of read_weft.py (an independent json+struct+hashlib reader) run on
// the file weft wrote, against the content weft put in.
func TestPythonReadsOurFile(t *testing.T) {
	p := filepath.Join("testdata", "interop", "weft_written.safetensors")
	want := interopFile()
	if *update {
		if err := Save(p, want); err != nil {
			t.Fatal(err)
		}
		t.Logf("now run: cd testdata/interop && /usr/bin/python3 read_weft.py")
	}
	raw, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	fresh, err := Encode(want)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(raw, fresh) {
		t.Fatalf("%s is not what Encode writes today; rerun with -update and read_weft.py", p)
	}
	js, err := os.ReadFile(filepath.Join("testdata", "interop", "weft_written.json"))
	if err != nil {
		t.Fatal(err)
	}
	var got struct {
		ChecksumOK    bool              `json:"checksum_ok"`
		Aligned       bool              `json:"data_starts_aligned"`
		BufferCovered bool              `json:"buffer_covered"`
		Metadata      map[string]string `json:"metadata"`
		Tensors       map[string]struct {
			DType  string    `json:"dtype"`
			Shape  []int     `json:"shape"`
			Values []float64 `json:"values"`
		} `json:"tensors"`
	}
	if err := json.Unmarshal(js, &got); err != nil {
		t.Fatal(err)
	}
	if !got.ChecksumOK || !got.Aligned || !got.BufferCovered {
		t.Errorf("python reader: checksum_ok %v, data_starts_aligned %v, buffer_covered %v; want all true", got.ChecksumOK, got.Aligned, got.BufferCovered)
	}
	dec, err := Decode(raw)
	if err != nil {
		t.Fatal(err)
	}
	wantMeta := map[string]string{MetaVersion: "1", MetaChecksum: dec.Checksum}
	for k, v := range want.Meta {
		wantMeta[k] = v
	}
	if !reflect.DeepEqual(got.Metadata, wantMeta) {
		t.Errorf("python metadata: got %v, want %v", got.Metadata, wantMeta)
	}
	if len(got.Tensors) != len(want.Tensors) {
		t.Errorf("python found %d tensors, want %d", len(got.Tensors), len(want.Tensors))
	}
	for _, w := range want.Tensors {
		g, ok := got.Tensors[w.Name]
		if !ok {
			t.Errorf("python reader lacks tensor %q", w.Name)
			continue
		}
		var vals []float64
		switch w.DType {
		case F32:
			v, _ := w.Float32s()
			for _, x := range v {
				vals = append(vals, float64(x))
			}
		case F64:
			vals, _ = w.Float64s()
		case I32:
			v, _ := w.Int32s()
			for _, x := range v {
				vals = append(vals, float64(x))
			}
		case I64:
			v, _ := w.Int64s()
			for _, x := range v {
				vals = append(vals, float64(x))
			}
		case U8:
			for _, x := range w.Data {
				vals = append(vals, float64(x))
			}
		}
		if g.DType != w.DType.String() || !reflect.DeepEqual(cloneShape(g.Shape), cloneShape(w.Shape)) || len(g.Values) != len(vals) {
			t.Errorf("tensor %q: python got %s %v %d values, want %v %v %d", w.Name, g.DType, g.Shape, len(g.Values), w.DType, w.Shape, len(vals))
			continue
		}
		for i := range vals {
			if g.Values[i] != vals[i] { // exact: every value is representable in both
				t.Errorf("tensor %q[%d]: python got %v, want %v", w.Name, i, g.Values[i], vals[i])
			}
		}
	}
}
