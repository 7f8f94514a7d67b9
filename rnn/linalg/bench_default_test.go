//go:build !openblas

package linalg

// extraBenchKernels returns the products benchmarked beside ours: none
// without the openblas tag.
func extraBenchKernels() []benchKernel { return nil }
