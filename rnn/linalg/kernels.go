package linalg

// kernels32 lists the float32 kernels this CPU can run, fastest first; the
// portable kernel is always last. Gemm uses the first.
var kernels32 = append(archKernels32(), portable32)

func kernel32() *kernel[float32] { return kernels32[0] }

// KernelName reports the float32 matrix-product kernel chosen for this CPU:
// "avx512", "avx2", "portable", or "openblas" in builds with that tag.
func KernelName() string { return kernelName() }
