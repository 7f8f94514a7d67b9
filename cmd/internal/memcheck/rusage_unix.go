//go:build unix

package memcheck

import (
	"os"
	"runtime"
	"syscall"
)

// maxRSS is the child's ru_maxrss in bytes: getrusage(2) gives kibibytes on
// Linux and the BSDs, bytes on macOS (each system's manual page).
func maxRSS(ps *os.ProcessState) int64 {
	ru, ok := ps.SysUsage().(*syscall.Rusage)
	if !ok || ru == nil {
		return 0
	}
	return rssBytes(int64(ru.Maxrss))
}

// selfMaxRSS is this process's own ru_maxrss in bytes, or 0.
func selfMaxRSS() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return rssBytes(int64(ru.Maxrss))
}

func rssBytes(maxrss int64) int64 {
	if runtime.GOOS != "darwin" && runtime.GOOS != "ios" {
		return maxrss << 10
	}
	return maxrss
}
