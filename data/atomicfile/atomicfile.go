// Package atomicfile writes files so that a crash, a full disk or a failed
// write leaves either the previous file or the complete new one, never a
// mix: every file weft keeps in a run directory goes through it.
//
// Write creates a temporary file in the destination's folder (its name
// starts with TempPrefix, so that CleanTemp finds what a killed process left
// behind), writes the content, checks the byte count, fsyncs and closes it,
// renames it over the destination and fsyncs the folder, so that the rename
// itself survives a power cut. Any failure before the rename removes the
// temporary file and leaves the destination untouched. A full disk is
// reported as such and still satisfies errors.Is(err, syscall.ENOSPC).
//
// New files get mode 0666 before the umask, as os.Create gives, whatever
// the file: weft keeps one mode for everything it writes.
//
// The file-system operations are package variables (CreateTemp, Rename,
// SyncDir) so that tests anywhere can inject faults; they are not safe to
// change while another goroutine writes.
package atomicfile

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync/atomic"
	"syscall"
)

// TempPrefix starts the name of every temporary file Write creates.
const TempPrefix = ".tmp-"

// File is what Write needs of the temporary file it writes.
type File interface {
	io.Writer
	Sync() error
	Close() error
	Name() string
}

// The file-system operations Write uses; tests replace them to inject
// faults (a full disk, a failing fsync or rename) and restore them after.
var (
	CreateTemp = createTemp
	Rename     = os.Rename
	SyncDir    = syncDirectory
)

var tempSeq atomic.Uint64

// createTemp creates a new file in dir named TempPrefix, base, the process
// id and a sequence number, with mode 0666 before the umask.
func createTemp(dir, base string) (File, error) {
	for {
		name := filepath.Join(dir, TempPrefix+base+"."+strconv.Itoa(os.Getpid())+"."+strconv.FormatUint(tempSeq.Add(1), 10))
		f, err := os.OpenFile(name, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o666)
		if errors.Is(err, fs.ErrExist) {
			continue
		}
		if err != nil {
			return nil, err
		}
		return f, nil
	}
}

// syncDirectory flushes dir's entries to disk. File systems that cannot
// sync a directory (EINVAL, ENOTSUP) are not an error.
func syncDirectory(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	if errors.Is(err, syscall.EINVAL) || errors.Is(err, errors.ErrUnsupported) {
		return nil
	}
	return err
}

// countingWriter turns a short write that reports no error (which
// io.Writer forbids, but a faulty file system may do) into one.
type countingWriter struct {
	w io.Writer
	n int64
}

func (c *countingWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.n += int64(n)
	if err == nil && n != len(p) {
		err = fmt.Errorf("%d of %d bytes written: %w", n, len(p), io.ErrShortWrite)
	}
	return n, err
}

// Write replaces the file at path with what write produces, atomically (see
// the package documentation). Errors name the step that failed but not
// path: callers name the file they were writing.
func Write(path string, write func(io.Writer) error) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := CreateTemp(dir, base)
	if err != nil {
		return describe("create temporary file", err)
	}
	defer func() {
		if err != nil {
			tmp.Close() // a second Close only returns an error
			os.Remove(tmp.Name())
		}
	}()
	cw := &countingWriter{w: tmp}
	if err := write(cw); err != nil {
		return describe("write temporary file", err)
	}
	if err := tmp.Sync(); err != nil {
		return describe("sync temporary file", err)
	}
	if err := tmp.Close(); err != nil {
		return describe("close temporary file", err)
	}
	if err := Rename(tmp.Name(), path); err != nil {
		return describe("rename temporary file", err)
	}
	if err := SyncDir(dir); err != nil {
		return describe("sync directory (the new file is in place but may not be durable)", err)
	}
	return nil
}

// WriteBytes replaces the file at path with b, atomically, and checks that
// every byte was written.
func WriteBytes(path string, b []byte) error {
	return Write(path, func(w io.Writer) error {
		_, err := w.Write(b)
		return err
	})
}

// WriteJSON replaces the file at path with v encoded as JSON, indented by
// indent ("" for one line) and ending with a line end, atomically.
func WriteJSON(path string, v any, indent string) error {
	var b []byte
	var err error
	if indent == "" {
		b, err = json.Marshal(v)
	} else {
		b, err = json.MarshalIndent(v, "", indent)
	}
	if err != nil {
		return err
	}
	return WriteBytes(path, append(b, '\n'))
}

// describe prefixes err with what was being done, and says "disk full"
// when it is ENOSPC.
func describe(what string, err error) error {
	if errors.Is(err, syscall.ENOSPC) {
		return fmt.Errorf("disk full: %s: %w", what, err)
	}
	return fmt.Errorf("%s: %w", what, err)
}

// CleanTemp removes the temporary files that an interrupted Write left in
// dir and returns their paths. Call it only while no Write into dir is in
// progress (for a run directory: while holding its lock).
func CleanTemp(dir string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("clean temporary files in %q: %w", dir, err)
	}
	var removed []string
	var first error
	for _, e := range ents {
		if !e.Type().IsRegular() || !strings.HasPrefix(e.Name(), TempPrefix) {
			continue
		}
		p := filepath.Join(dir, e.Name())
		if err := os.Remove(p); err != nil {
			if first == nil {
				first = fmt.Errorf("clean temporary files in %q: %w", dir, err)
			}
			continue
		}
		removed = append(removed, p)
	}
	return removed, first
}
