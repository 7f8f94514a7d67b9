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
	n := int64(ru.Maxrss)
	if runtime.GOOS != "darwin" && runtime.GOOS != "ios" {
		n <<= 10
	}
	return n
}
