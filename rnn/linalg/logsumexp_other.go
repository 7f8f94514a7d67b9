//go:build !amd64

package linalg

// expShift64 is the assembly kernel of amd64 (see useExpShift64); there is
// none here.
func expShift64(dst []float64, x []float32, shift float64) int { return 0 }

// haveExpShift64: no CPU runs it.
const haveExpShift64 = false
