//go:build linux || darwin

package main

import (
	"runtime"
	"syscall"
)

// peakRSS is the largest resident set size of the process so far, in bytes,
// from getrusage(2): ru_maxrss is in kibibytes on Linux and in bytes on
// macOS (the getrusage manual pages of each system).
func peakRSS() (int64, bool) {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0, false
	}
	rss := int64(ru.Maxrss)
	if runtime.GOOS != "darwin" {
		rss *= 1024
	}
	return rss, true
}
