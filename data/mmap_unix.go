//go:build linux || darwin || freebsd || netbsd || openbsd

package data

import (
	"golang.org/x/sys/unix"
	"os"
)

// mapFile maps the first size bytes of f read-only.
func mapFile(f *os.File, size int64) ([]byte, error) {
	if size == 0 || int64(int(size)) != size {
		return nil, unix.EINVAL
	}
	return unix.Mmap(int(f.Fd()), 0, int(size), unix.PROT_READ, unix.MAP_SHARED)
}

func unmapFile(b []byte) error { return unix.Munmap(b) }

// releasePages gives the resident pages of a read-only file map back; the
// next read of them faults them in again from the page cache.
func releasePages(b []byte) { _ = unix.Madvise(b, unix.MADV_DONTNEED) }
