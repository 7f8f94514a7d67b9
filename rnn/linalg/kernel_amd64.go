package linalg

// archKernels32 returns the amd64 assembly kernels the CPU supports,
// fastest first.
func archKernels32() []*kernel[float32] { return nil }
