package checkpoint

import (
	"bytes"
	"errors"
	"io"
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

// faultyFile wraps a real temporary file and fails one operation.
type faultyFile struct {
	*os.File
	failWrite  error // returned after writing half the bytes
	shortWrite bool  // write half and report no error
	failSync   error
	failClose  error
}

func (f *faultyFile) Write(b []byte) (int, error) {
	if f.failWrite != nil || f.shortWrite {
		n, _ := f.File.Write(b[:len(b)/2])
		if f.failWrite != nil {
			return n, &fs.PathError{Op: "write", Path: f.Name(), Err: f.failWrite}
		}
		return n, nil
	}
	return f.File.Write(b)
}

func (f *faultyFile) Sync() error {
	if f.failSync != nil {
		return &fs.PathError{Op: "sync", Path: f.Name(), Err: f.failSync}
	}
	return f.File.Sync()
}

func (f *faultyFile) Close() error {
	err := f.File.Close()
	if f.failClose != nil {
		return &fs.PathError{Op: "close", Path: f.Name(), Err: f.failClose}
	}
	return err
}

func assertNoTemp(t *testing.T, dir string) {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range ents {
		if strings.HasPrefix(e.Name(), atomicfile.TempPrefix) {
			t.Errorf("temporary file %s left in %s", e.Name(), dir)
		}
	}
}

// TestSaveFaults makes each step of a save fail and checks that the
// previous checkpoint at the same path still loads with its old content
// and that no temporary file is left.
func TestSaveFaults(t *testing.T) {
	tests := []struct {
		name   string
		file   func(*os.File) atomicfile.File // nil: the real file
		rename func(string, string) error
		is     error
		want   string
	}{
		{name: "disk full mid-write", file: func(f *os.File) atomicfile.File { return &faultyFile{File: f, failWrite: syscall.ENOSPC} }, is: syscall.ENOSPC, want: "disk full"},
		{name: "short write", file: func(f *os.File) atomicfile.File { return &faultyFile{File: f, shortWrite: true} }, is: io.ErrShortWrite, want: "bytes written"},
		{name: "fsync fails", file: func(f *os.File) atomicfile.File { return &faultyFile{File: f, failSync: syscall.EIO} }, is: syscall.EIO, want: "sync"},
		{name: "fsync disk full", file: func(f *os.File) atomicfile.File { return &faultyFile{File: f, failSync: syscall.ENOSPC} }, is: syscall.ENOSPC, want: "disk full"},
		{name: "close fails", file: func(f *os.File) atomicfile.File { return &faultyFile{File: f, failClose: syscall.EIO} }, is: syscall.EIO, want: "close"},
		{name: "rename fails", rename: func(string, string) error { return &os.LinkError{Op: "rename", Err: syscall.EXDEV} }, is: syscall.EXDEV, want: "rename"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			p := BestPath(dir)
			old := &File{Meta: map[string]string{"which": "old"}, Tensors: []Tensor{NewFloat32("model.w", []int{2}, []float32{1, 2})}}
			if err := Save(p, old); err != nil {
				t.Fatal(err)
			}
			orig := atomicfile.CreateTemp
			defer func(c func(string, string) (atomicfile.File, error), r func(string, string) error) {
				atomicfile.CreateTemp, atomicfile.Rename = c, r
			}(atomicfile.CreateTemp, atomicfile.Rename)
			if tc.file != nil {
				atomicfile.CreateTemp = func(dir, base string) (atomicfile.File, error) {
					f, err := orig(dir, base)
					if err != nil {
						return nil, err
					}
					return tc.file(f.(*os.File)), nil
				}
			}
			if tc.rename != nil {
				atomicfile.Rename = tc.rename
			}
			neu := &File{Meta: map[string]string{"which": "new"}, Tensors: []Tensor{NewFloat32("model.w", []int{4096}, make([]float32, 4096))}}
			err := Save(p, neu)
			if !errors.Is(err, tc.is) || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), p) {
				t.Errorf("got error %v, want one wrapping %v, naming %s and containing %q", err, tc.is, p, tc.want)
			}
			got, lerr := Load(p)
			if lerr != nil {
				t.Fatalf("previous checkpoint no longer loads: %v", lerr)
			}
			if got.Meta["which"] != "old" {
				t.Errorf("got checkpoint %q after the failed save, want the old one", got.Meta["which"])
			}
			assertNoTemp(t, dir)
		})
	}
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
