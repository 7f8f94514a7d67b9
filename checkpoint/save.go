package checkpoint

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"weft/data/atomicfile"
)

// Save encodes f and writes it to path through atomicfile.WriteBytes: a
// temporary file in path's directory, checked, fsynced, renamed over path,
// the directory fsynced. If any step before the rename fails, whatever was
// at path is untouched. A full disk is reported as such, and the error
// still satisfies errors.Is(err, syscall.ENOSPC).
func Save(path string, f *File) error {
	data, err := Encode(f)
	if err != nil {
		return fmt.Errorf("save checkpoint %q: %w", path, err)
	}
	if err := atomicfile.WriteBytes(path, data); err != nil {
		return fmt.Errorf("save checkpoint %q: %w", path, err)
	}
	return nil
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
		return nil, corruptf("not a safetensors file: its first 8 bytes give a header length of %d, beyond the %d-byte limit", n, MaxHeaderBytes)
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
