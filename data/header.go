package data

import "fmt"

// FileHeader starts every versioned JSON file weft writes (the split
// report, the baselines manifest, a marks file, ...): the file's format
// name and its version, which readers check before trusting the rest.
type FileHeader struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
}

// Check accepts a file of format want, or of no format and version 0 when
// zeroOK (a file written before it had a header, with the same fields
// otherwise), up to version max. path names the file in errors.
func (h FileHeader) Check(path, want string, max int, zeroOK bool) error {
	switch {
	case h.Format == "" && h.Version == 0 && zeroOK:
		return nil
	case h.Format != want:
		return fmt.Errorf("%s: not a %q file (format %q)", path, want, h.Format)
	case h.Version < 1 || h.Version > max:
		return fmt.Errorf("%s: format version %d; this weft reads versions 1 to %d (a newer weft wrote it?)", path, h.Version, max)
	}
	return nil
}
