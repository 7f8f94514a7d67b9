//go:build !unix

package memcheck

import "os"

// maxRSS is not known on this system.
func maxRSS(*os.ProcessState) int64 { return 0 }

// selfMaxRSS is not known on this system.
func selfMaxRSS() int64 { return 0 }
