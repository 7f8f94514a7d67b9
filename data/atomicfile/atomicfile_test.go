package atomicfile

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
)

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
		if strings.HasPrefix(e.Name(), TempPrefix) {
			t.Errorf("temporary file %s left in %s", e.Name(), dir)
		}
	}
}

func TestWriteBytes(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "f.json")
	for _, content := range []string{"first", "second, longer"} {
		if err := WriteBytes(p, []byte(content)); err != nil {
			t.Fatal(err)
		}
		got, err := os.ReadFile(p)
		if err != nil || string(got) != content {
			t.Errorf("got %q, %v; want %q", got, err, content)
		}
	}
	fi, err := os.Stat(p)
	if err != nil {
		t.Fatal(err)
	}
	// os.Create's mode: 0666 less the umask; the umask only clears bits.
	if fi.Mode().Perm()&0o600 != 0o600 {
		t.Errorf("mode %v: want the owner to read and write, as os.Create gives", fi.Mode())
	}
	assertNoTemp(t, dir)
}

// TestFaults makes each step of a write fail and checks that the previous
// file is untouched, that the error wraps the cause and says what failed,
// and that no temporary file is left.
func TestFaults(t *testing.T) {
	tests := []struct {
		name   string
		file   func(*os.File) File // nil: the real file
		rename func(string, string) error
		is     error
		want   string
	}{
		{name: "disk full mid-write", file: func(f *os.File) File { return &faultyFile{File: f, failWrite: syscall.ENOSPC} }, is: syscall.ENOSPC, want: "disk full"},
		{name: "short write", file: func(f *os.File) File { return &faultyFile{File: f, shortWrite: true} }, is: io.ErrShortWrite, want: "bytes written"},
		{name: "fsync fails", file: func(f *os.File) File { return &faultyFile{File: f, failSync: syscall.EIO} }, is: syscall.EIO, want: "sync"},
		{name: "fsync disk full", file: func(f *os.File) File { return &faultyFile{File: f, failSync: syscall.ENOSPC} }, is: syscall.ENOSPC, want: "disk full"},
		{name: "close fails", file: func(f *os.File) File { return &faultyFile{File: f, failClose: syscall.EIO} }, is: syscall.EIO, want: "close"},
		{name: "rename fails", rename: func(string, string) error { return &os.LinkError{Op: "rename", Err: syscall.EXDEV} }, is: syscall.EXDEV, want: "rename"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			p := filepath.Join(dir, "state.bin")
			if err := WriteBytes(p, []byte("old")); err != nil {
				t.Fatal(err)
			}
			orig := CreateTemp
			defer func(c func(string, string) (File, error), r func(string, string) error) { CreateTemp, Rename = c, r }(CreateTemp, Rename)
			if tc.file != nil {
				CreateTemp = func(dir, base string) (File, error) {
					f, err := orig(dir, base)
					if err != nil {
						return nil, err
					}
					return tc.file(f.(*os.File)), nil
				}
			}
			if tc.rename != nil {
				Rename = tc.rename
			}
			err := WriteBytes(p, bytes.Repeat([]byte("new"), 4096))
			if !errors.Is(err, tc.is) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got error %v, want one wrapping %v and containing %q", err, tc.is, tc.want)
			}
			if got, _ := os.ReadFile(p); string(got) != "old" {
				t.Errorf("got %q after the failed write, want the old content", got)
			}
			assertNoTemp(t, dir)
		})
	}
}

// TestSyncDirFails: the new file is in place, and the error says it may not
// be durable.
func TestSyncDirFails(t *testing.T) {
	defer func(s func(string) error) { SyncDir = s }(SyncDir)
	SyncDir = func(string) error { return syscall.EIO }
	p := filepath.Join(t.TempDir(), "f")
	err := WriteBytes(p, []byte("x"))
	if !errors.Is(err, syscall.EIO) || !strings.Contains(err.Error(), "may not be durable") {
		t.Errorf("got %v, want an EIO error saying the file may not be durable", err)
	}
}

// TestCreateFails covers a folder where no file can be created.
func TestCreateFails(t *testing.T) {
	defer func(c func(string, string) (File, error)) { CreateTemp = c }(CreateTemp)
	CreateTemp = func(string, string) (File, error) {
		return nil, &fs.PathError{Op: "open", Path: "x", Err: syscall.ENOSPC}
	}
	err := WriteBytes(filepath.Join(t.TempDir(), "f"), nil)
	if !errors.Is(err, syscall.ENOSPC) || !strings.Contains(err.Error(), "disk full: create temporary file") {
		t.Errorf("got %v, want a disk-full error wrapping ENOSPC", err)
	}
}

func TestCleanTemp(t *testing.T) {
	dir := t.TempDir()
	stale := filepath.Join(dir, TempPrefix+"step-000000003.safetensors.123.1")
	keep := filepath.Join(dir, "step-000000003.safetensors")
	for _, p := range []string{stale, keep} {
		if err := os.WriteFile(p, []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	removed, err := CleanTemp(dir)
	if err != nil || len(removed) != 1 || removed[0] != stale {
		t.Errorf("got removed %v, %v; want [%s]", removed, err, stale)
	}
	if _, err := os.Stat(keep); err != nil {
		t.Errorf("CleanTemp removed a finished file: %v", err)
	}
}
