//go:build !unix

package runs

import "os"

// processAlive reports whether a process with this id exists on this host.
func processAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	p, err := os.FindProcess(pid)
	if err != nil {
		return false
	}
	p.Release()
	return true
}
