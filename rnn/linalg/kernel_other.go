//go:build !amd64

package linalg

// archKernels32 returns the assembly kernels of this architecture: none.
func archKernels32() []*kernel[float32] { return nil }

// archVecImpls returns the assembly elementwise kernels: none.
func archVecImpls() []*vecImpl { return nil }
