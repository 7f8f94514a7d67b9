package data

import "fmt"

// FileHeader starts every versioned JSON file weft writes (the split
// report, the baselines manifest, a marks file, ...): the file's format
// name and its version, which readers check before trusting the rest.
type FileHeader struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
}

// Check accepts a file of want's format and a version from 1 to want's
// (the version this weft writes), or, when zeroOK, of no format and version
// 0 (a file written before it had a header, with the same fields
// otherwise). path names the file in errors.
func (h FileHeader) Check(path string, want FileHeader, zeroOK bool) error {
	switch {
	case h.Format == "" && h.Version == 0 && zeroOK:
		return nil
	case h.Format != want.Format:
		return fmt.Errorf("%s: not a %q file (format %q)", path, want.Format, h.Format)
	case h.Version < 1 || h.Version > want.Version:
		return fmt.Errorf("%s: format version %d; this weft reads versions 1 to %d (a newer weft wrote it?)", path, h.Version, want.Version)
	}
	return nil
}
