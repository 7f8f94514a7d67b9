package checkpoint

import (
	"bytes"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"weft/data/atomicfile"
)

func TestSaveLoad(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, StepName(12))
	want := sampleFile()
	if err := Save(p, want); err != nil {
		t.Fatal(err)
	}
	first, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	got, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	w := *want
	w.Version = CurrentVersion
	equalFiles(t, got, &w)
	// Saving the loaded content again gives the same bytes (what the
	// exact-resume tests compare).
	if err := Save(p, got); err != nil {
		t.Fatal(err)
	}
	second, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(first, second) {
		t.Error("second save of the same content gave different bytes")
	}
	assertNoTemp(t, dir)
}

func TestLoadErrors(t *testing.T) {
	dir := t.TempDir()
	for _, tc := range []struct {
		name string
		path string
		is   error
		want string
	}{
		{"missing", filepath.Join(dir, "nope.safetensors"), fs.ErrNotExist, `load checkpoint "` + filepath.Join(dir, "nope.safetensors") + `"`},
		{"directory", dir, nil, "not a regular file"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Load(tc.path)
			if err == nil || (tc.is != nil && !errors.Is(err, tc.is)) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got %v, want an error containing %q", err, tc.want)
			}
		})
	}
}

// assertNoTemp fails when a save left a temporary file in dir.
func assertNoTemp(t *testing.T, dir string) {
	t.Helper()
	left, err := atomicfile.CleanTemp(dir)
	if err != nil || len(left) > 0 {
		t.Errorf("temporary files left in %s: %v %v", dir, left, err)
	}
}

// TestSaveFaultKeepsOld makes the write of a second save fail with a full
// disk (through atomicfile's seam; atomicfile's own tests fail every step)
// and checks that the error names the file and wraps ENOSPC, and that the
// previous checkpoint still loads with its old content.
func TestSaveFaultKeepsOld(t *testing.T) {
	dir := t.TempDir()
	p := BestPath(dir)
	old := &File{Meta: map[string]string{"which": "old"}, Tensors: []Tensor{NewFloat32("model.w", []int{2}, []float32{1, 2})}}
	if err := Save(p, old); err != nil {
		t.Fatal(err)
	}
	defer func(r func(string, string) error) { atomicfile.Rename = r }(atomicfile.Rename)
	atomicfile.Rename = func(string, string) error { return &os.LinkError{Op: "rename", Err: syscall.ENOSPC} }
	err := Save(p, &File{Meta: map[string]string{"which": "new"}})
	if !errors.Is(err, syscall.ENOSPC) || !strings.Contains(err.Error(), "disk full") || !strings.Contains(err.Error(), p) {
		t.Errorf("got error %v, want a disk-full error naming %s", err, p)
	}
	got, lerr := Load(p)
	if lerr != nil || got.Meta["which"] != "old" {
		t.Errorf("after the failed save: %v, %v; want the old checkpoint", got, lerr)
	}
	assertNoTemp(t, dir)
}

// TestSaveCreateFails covers a directory where no file can be created.
func TestSaveCreateFails(t *testing.T) {
	defer func(c func(string, string) (atomicfile.File, error)) { atomicfile.CreateTemp = c }(atomicfile.CreateTemp)
	atomicfile.CreateTemp = func(string, string) (atomicfile.File, error) {
		return nil, &fs.PathError{Op: "open", Path: "x", Err: syscall.ENOSPC}
	}
	err := Save(filepath.Join(t.TempDir(), BestName), &File{})
	if !errors.Is(err, syscall.ENOSPC) || !strings.Contains(err.Error(), "disk full: create temporary file") {
		t.Errorf("got %v, want a disk-full error wrapping ENOSPC", err)
	}
}
