package checkpoint

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestSummarize(t *testing.T) {
	f, err := Load(filepath.Join("testdata", "v1.safetensors"))
	if err != nil {
		t.Fatal(err)
	}
	s := Summarize(f)
	if !s.Valid || s.FormatVersion != 1 || len(s.Checksum) != 64 {
		t.Errorf("got valid %v, version %d, checksum %q; want true, 1, 64 hex digits", s.Valid, s.FormatVersion, s.Checksum)
	}
	if want := []string{"config", "trainer", "vocab"}; !reflect.DeepEqual(s.MetadataKeys, want) {
		t.Errorf("got metadata keys %v, want %v", s.MetadataKeys, want)
	}
	// Element counts from fixtureV1: model 3*2+3, optim 3*2, state 4+2+3+0.
	if want := map[string]int64{"model": 9, "optim": 6, "state": 9}; !reflect.DeepEqual(s.Elements, want) {
		t.Errorf("got elements %v, want %v", s.Elements, want)
	}
	// Bytes: model 9*4, optim 6*8, state 4*8+2*4+3*1.
	if want := map[string]int64{"model": 36, "optim": 48, "state": 43}; !reflect.DeepEqual(s.Bytes, want) {
		t.Errorf("got bytes %v, want %v", s.Bytes, want)
	}
	js, err := json.Marshal(s.Tensors[0])
	if err != nil {
		t.Fatal(err)
	}
	if want := `{"name":"model.embed","dtype":"F32","shape":[3,2],"bytes":24,"family":"model"}`; string(js) != want {
		t.Errorf("got JSON %s, want %s", js, want)
	}
}

func TestInspect(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join("testdata", "v1.safetensors")
	raw, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	flipped := append([]byte{}, raw...)
	flipped[len(flipped)-1] ^= 1
	damaged := filepath.Join(dir, "damaged.safetensors")
	if err := os.WriteFile(damaged, flipped, 0o644); err != nil {
		t.Fatal(err)
	}
	newer := filepath.Join(dir, "newer.safetensors")
	if err := os.WriteFile(newer, encodeVersion(t, MaxVersion+1), 0o644); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name        string
		path        string
		valid       bool
		version     int
		tensors     int
		problem     string
		errNotExist bool
	}{
		{"valid", good, true, 1, 7, "", false},
		{"damaged data", damaged, false, 1, 7, "checksum mismatch", false},
		{"newer version", newer, false, MaxVersion + 1, 1, "newer than supported", false},
		{"reference file", filepath.Join("testdata", "interop", "reference.safetensors"), false, 0, 7, "not a weft checkpoint", false},
		{"missing", filepath.Join(dir, "missing"), false, 0, 0, "", true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, err := Inspect(tc.path)
			if tc.errNotExist {
				if !errors.Is(err, os.ErrNotExist) {
					t.Errorf("got %v, want ErrNotExist", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if s.Valid != tc.valid || s.FormatVersion != tc.version || len(s.Tensors) != tc.tensors || !strings.Contains(s.Problem, tc.problem) {
				t.Errorf("got valid %v version %d, %d tensors, problem %q; want %v %d %d %q", s.Valid, s.FormatVersion, len(s.Tensors), s.Problem, tc.valid, tc.version, tc.tensors, tc.problem)
			}
		})
	}
}

// Example shows a save and a load; the tensor table is what weft inspect
// prints from a Summary.
func Example() {
	dir, err := os.MkdirTemp("", "weft-example")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer os.RemoveAll(dir)

	f := &File{
		Meta: map[string]string{"trainer": `{"step":1200}`},
		Tensors: []Tensor{
			NewFloat32("model.out.b", []int{3}, []float32{0.5, -1, 2}),
			NewFloat32("optim.adam.m.model.out.b", []int{3}, []float32{0, 0, 0}),
		},
	}
	p := StepPath(dir, 1200)
	if err := Save(p, f); err != nil {
		fmt.Println(err)
		return
	}
	got, err := Load(p)
	if err != nil {
		fmt.Println(err)
		return
	}
	b, _ := got.Tensor("model.out.b").Float32s()
	fmt.Println(filepath.Base(p), got.Version, got.Meta["trainer"], b)
	for _, ti := range Summarize(got).Tensors {
		fmt.Println(ti.Name, ti.DType, ti.Shape, ti.Bytes, ti.Family)
	}
	// Output:
	// step-000001200.safetensors 1 {"step":1200} [0.5 -1 2]
	// model.out.b F32 [3] 12 model
	// optim.adam.m.model.out.b F32 [3] 12 optim
}
