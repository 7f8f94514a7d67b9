//go:build linux || darwin

package main

import (
	"runtime"
	"syscall"
	"time"
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

// processCPU is the processor time the process has used so far, user and
// system, all threads, from getrusage(2).
func processCPU() (time.Duration, bool) {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0, false
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano()), true
}
