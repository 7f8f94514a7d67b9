package checkpoint

import (
	"encoding/binary"
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

// tempFile is what Save needs from the file it writes before renaming it.
type tempFile interface {
	io.Writer
	Sync() error
	Close() error
	Name() string
}

// The file-system operations Save uses, replaceable by tests to inject
// faults (a full disk, a failing fsync or rename).
var (
	createTemp = createTempFile
	rename     = os.Rename
	syncDir    = syncDirectory
)

// tempPrefix starts the name of every temporary file Save creates, so that
// CleanTemp can find what a killed process left behind.
const tempPrefix = ".tmp-"

var tempSeq atomic.Uint64

// createTempFile creates a new file in dir whose name starts with
// tempPrefix+base, with mode 0666 before the umask (as os.Create, unlike
// os.CreateTemp's 0600, so that checkpoints get the user's usual mode).
func createTempFile(dir, base string) (tempFile, error) {
	for {
		name := filepath.Join(dir, tempPrefix+base+"."+strconv.Itoa(os.Getpid())+"."+strconv.FormatUint(tempSeq.Add(1), 10))
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

// Save writes f to path atomically: it encodes f, writes the bytes to a new
// temporary file in path's directory, checks the byte count, fsyncs and
// closes it, renames it over path and fsyncs the directory. If any step
// before the rename fails, the temporary file is removed and whatever was
// at path is untouched. A full disk is reported as such, and the error
// still satisfies errors.Is(err, syscall.ENOSPC).
func Save(path string, f *File) error {
	data, err := Encode(f)
	if err != nil {
		return fmt.Errorf("save checkpoint %q: %w", path, err)
	}
	if err := writeAtomic(path, data); err != nil {
		return fmt.Errorf("save checkpoint %q: %w", path, err)
	}
	return nil
}

func writeAtomic(path string, data []byte) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := createTemp(dir, base)
	if err != nil {
		return describe("create temporary file", err)
	}
	defer func() {
		if err != nil {
			tmp.Close() // a second Close only returns an error
			os.Remove(tmp.Name())
		}
	}()
	n, err := tmp.Write(data)
	if err != nil {
		return describe("write temporary file", err)
	}
	if n != len(data) {
		return fmt.Errorf("write %s: %d of %d bytes written: %w", tmp.Name(), n, len(data), io.ErrShortWrite)
	}
	if err := tmp.Sync(); err != nil {
		return describe("sync temporary file", err)
	}
	if err := tmp.Close(); err != nil {
		return describe("close temporary file", err)
	}
	if err := rename(tmp.Name(), path); err != nil {
		return describe("rename temporary file", err)
	}
	if err := syncDir(dir); err != nil {
		return describe("sync directory (the new file is in place but may not be durable)", err)
	}
	return nil
}

// describe prefixes err with what was being done, and says "disk full"
// when it is ENOSPC.
func describe(what string, err error) error {
	if errors.Is(err, syscall.ENOSPC) {
		return fmt.Errorf("disk full: %s: %w", what, err)
	}
	return fmt.Errorf("%s: %w", what, err)
}

// Load reads and fully verifies the weft checkpoint at path (see Decode).
// It reads the 8-byte length field first and checks it against the file's
// size, so a damaged length never causes a large allocation.
func Load(path string) (*File, error) {
	data, err := readChecked(path)
	if err != nil {
		return nil, fmt.Errorf("load checkpoint %q: %w", path, err)
	}
	f, err := Decode(data)
	if err != nil {
		return nil, fmt.Errorf("load checkpoint %q: %w", path, err)
	}
	return f, nil
}

// LoadSafetensors reads any safetensors file at path without requiring
// weft's metadata (see DecodeSafetensors).
func LoadSafetensors(path string) (*File, error) {
	data, err := readChecked(path)
	if err != nil {
		return nil, fmt.Errorf("read safetensors %q: %w", path, err)
	}
	f, err := DecodeSafetensors(data)
	if err != nil {
		return nil, fmt.Errorf("read safetensors %q: %w", path, err)
	}
	return f, nil
}

// readChecked returns the bytes of the regular file at path after checking
// the header length field against the file's size.
func readChecked(path string) ([]byte, error) {
	fh, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer fh.Close()
	st, err := fh.Stat()
	if err != nil {
		return nil, err
	}
	if !st.Mode().IsRegular() {
		return nil, fmt.Errorf("not a regular file (%v)", st.Mode().Type())
	}
	size := st.Size()
	if size < 8 {
		return nil, corruptf("truncated: %d bytes, shorter than the 8-byte header length field", size)
	}
	var lenField [8]byte
	if _, err := io.ReadFull(fh, lenField[:]); err != nil {
		return nil, err
	}
	switch n := binary.LittleEndian.Uint64(lenField[:]); {
	case n > MaxHeaderBytes:
		return nil, corruptf("header length %d exceeds the %d-byte limit", n, MaxHeaderBytes)
	case n > uint64(size-8):
		return nil, corruptf("truncated: header length %d exceeds the %d bytes after the length field", n, size-8)
	}
	data := make([]byte, size)
	copy(data, lenField[:])
	if _, err := io.ReadFull(fh, data[8:]); err != nil {
		if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) {
			return nil, corruptf("file shrank while being read")
		}
		return nil, err
	}
	return data, nil
}

// CleanTemp removes the temporary files that an interrupted Save left in
// dir and returns their paths. Call it only while holding the directory's
// lock, so that no Save is in progress.
func CleanTemp(dir string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("clean temporary files in %q: %w", dir, err)
	}
	var removed []string
	var first error
	for _, e := range ents {
		if !e.Type().IsRegular() || !strings.HasPrefix(e.Name(), tempPrefix) {
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
