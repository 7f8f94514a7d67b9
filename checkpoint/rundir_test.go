package checkpoint

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"weft/data/atomicfile"
)

func TestStepNames(t *testing.T) {
	tests := []struct {
		name string
		step int64
		ok   bool
	}{
		{"step-000001200.safetensors", 1200, true},
		{"step-000000000.safetensors", 0, true},
		{"step-1234567890.safetensors", 1234567890, true},
		{"step-1200.safetensors", 0, false},       // not zero-padded: not ours
		{"step-0000001200.safetensors", 0, false}, // over-padded
		{"step-00000120a.safetensors", 0, false},
		{"step-.safetensors", 0, false},
		{"step-000001200.safetensors.bak", 0, false},
		{BestName, 0, false},
		{".tmp-step-000001200.safetensors.1.1", 0, false},
	}
	for _, tc := range tests {
		step, ok := ParseStepName(tc.name)
		if ok != tc.ok || step != tc.step {
			t.Errorf("ParseStepName(%q): got %d %v, want %d %v", tc.name, step, ok, tc.step, tc.ok)
		}
		if tc.ok && StepName(tc.step) != tc.name {
			t.Errorf("StepName(%d): got %q, want %q", tc.step, StepName(tc.step), tc.name)
		}
	}
}

// writeRun saves periodic checkpoints for steps, each with its step in the
// metadata, plus a best copy, and returns the directory.
func writeRun(t *testing.T, steps ...int64) string {
	t.Helper()
	dir := t.TempDir()
	for _, s := range steps {
		f := &File{Meta: map[string]string{"step": strconv.FormatInt(s, 10)}, Tensors: []Tensor{NewFloat32("model.w", []int{1}, []float32{float32(s)})}}
		if err := Save(StepPath(dir, s), f); err != nil {
			t.Fatal(err)
		}
	}
	if err := Save(BestPath(dir), &File{Meta: map[string]string{"step": "best"}}); err != nil {
		t.Fatal(err)
	}
	return dir
}

func stepsOf(ents []Entry) []int64 {
	out := []int64{}
	for _, e := range ents {
		out = append(out, e.Step)
	}
	return out
}

func TestList(t *testing.T) {
	dir := writeRun(t, 100, 2000, 300)
	for _, junk := range []string{"step-1.safetensors", "notes.txt", atomicfile.TempPrefix + StepName(5000) + ".1.1"} {
		if err := os.WriteFile(filepath.Join(dir, junk), nil, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.Mkdir(filepath.Join(dir, StepName(9000)), 0o755); err != nil {
		t.Fatal(err)
	}
	ents, err := List(dir)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := stepsOf(ents), []int64{2000, 300, 100}; !reflect.DeepEqual(got, want) {
		t.Errorf("got steps %v, want %v", got, want)
	}
	if _, err := List(filepath.Join(dir, "missing")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("List of a missing directory: got %v, want ErrNotExist", err)
	}
}

func TestLoadNewestValid(t *testing.T) {
	damage := func(t *testing.T, dir string, step int64, how string) {
		p := StepPath(dir, step)
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		switch how {
		case "truncate":
			b = b[:len(b)/2]
		case "flip":
			b[len(b)-1] ^= 0x10
		case "empty":
			b = nil
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	tests := []struct {
		name     string
		steps    []int64
		damage   map[int64]string
		wantStep string
		skipped  int
		wantErr  error
	}{
		{"newest intact", []int64{1, 2, 3}, nil, "3", 0, nil},
		{"newest truncated", []int64{1, 2, 3}, map[int64]string{3: "truncate"}, "2", 1, nil},
		{"two damaged", []int64{1, 2, 3}, map[int64]string{3: "flip", 2: "empty"}, "1", 2, nil},
		{"all damaged", []int64{1, 2}, map[int64]string{1: "flip", 2: "flip"}, "", 2, ErrCorrupt},
		{"none", nil, nil, "", 0, ErrNoCheckpoint},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := writeRun(t, tc.steps...)
			for s, how := range tc.damage {
				damage(t, dir, s, how)
			}
			path, f, skipped, err := LoadNewestValid(dir)
			if len(skipped) != tc.skipped {
				t.Errorf("got %d skipped %v, want %d", len(skipped), skipped, tc.skipped)
			}
			for _, e := range skipped {
				if !errors.Is(e, ErrCorrupt) || !strings.Contains(e.Error(), dir) {
					t.Errorf("skipped error %v: want ErrCorrupt naming the file", e)
				}
			}
			if tc.wantErr != nil {
				if !errors.Is(err, tc.wantErr) {
					t.Errorf("got error %v, want %v", err, tc.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if f.Meta["step"] != tc.wantStep || filepath.Base(path) != "step-00000000"+tc.wantStep+".safetensors" {
				t.Errorf("got %s with step %q, want step %s", path, f.Meta["step"], tc.wantStep)
			}
		})
	}
}

// TestLoadNewestValidStopsOnVersion checks that a checkpoint from a newer
// weft is not silently skipped: resuming from an older one would lose work.
func TestLoadNewestValidStopsOnVersion(t *testing.T) {
	dir := writeRun(t, 1)
	if err := os.WriteFile(StepPath(dir, 2), encodeVersion(t, MaxVersion+1), 0o644); err != nil {
		t.Fatal(err)
	}
	_, _, _, err := LoadNewestValid(dir)
	if !errors.Is(err, ErrVersion) {
		t.Errorf("got %v, want ErrVersion", err)
	}
}

func TestPrune(t *testing.T) {
	tests := []struct {
		name    string
		keep    int
		protect []int64
		want    []int64
	}{
		{"keep 2", 2, nil, []int64{50, 40}},
		{"keep all", 10, nil, []int64{50, 40, 30, 20, 10}},
		{"keep 0 means 1", 0, nil, []int64{50}},
		{"protected older file", 1, []int64{20}, []int64{50, 20}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := writeRun(t, 10, 20, 30, 40, 50)
			var protect []string
			for _, s := range tc.protect {
				protect = append(protect, StepPath(dir, s))
			}
			removed, err := Prune(dir, tc.keep, protect...)
			if err != nil {
				t.Fatal(err)
			}
			ents, err := List(dir)
			if err != nil {
				t.Fatal(err)
			}
			if got := stepsOf(ents); !reflect.DeepEqual(got, tc.want) {
				t.Errorf("got steps %v left, want %v", got, tc.want)
			}
			if len(removed)+len(tc.want) != 5 {
				t.Errorf("got %d removed %v, want %d", len(removed), removed, 5-len(tc.want))
			}
			if _, err := Load(BestPath(dir)); err != nil {
				t.Errorf("best copy: %v", err)
			}
		})
	}
}
