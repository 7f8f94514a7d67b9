//go:build !(linux || darwin || freebsd || netbsd || openbsd)

package data

import (
	"errors"
	"os"
)

// mapFile reports that mapping is unavailable here: the splits read the
// cache file window by window instead.
func mapFile(*os.File, int64) ([]byte, error) { return nil, errors.ErrUnsupported }

func unmapFile([]byte) error { return nil }

func releasePages([]byte) {}
