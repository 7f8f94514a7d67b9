package linalg

// Mul sets dst[i] = a[i]·b[i] for i < len(a), one rounding per element, so
// the result is the same bits whichever kernel runs (AVX-512 on amd64 where
// the CPU has it, a Go loop elsewhere). dst and b must be at least as long
// as a.
func Mul[T Float](dst, a, b []T) {
	dst, b = dst[:len(a)], b[:len(a)]
	j0 := 0
	if isF32[T]() && mul32 != nil {
		j0 = mul32(as32(dst), as32(a), as32(b))
	}
	for j := j0; j < len(a); j++ {
		dst[j] = a[j] * b[j]
	}
}

// MulAddMul sets dst[i] = a[i]·b[i] + c[i]·d[i] for i < len(a): each
// product rounded, then the sum rounded, never a fused multiply-add (the
// conversions in the Go loop forbid the compiler one), so the result is the
// same bits whichever kernel runs and on every architecture. dst, b, c and
// d must be at least as long as a.
func MulAddMul[T Float](dst, a, b, c, d []T) {
	dst, b, c, d = dst[:len(a)], b[:len(a)], c[:len(a)], d[:len(a)]
	j0 := 0
	if isF32[T]() && mulAddMul32 != nil {
		j0 = mulAddMul32(as32(dst), as32(a), as32(b), as32(c), as32(d))
	}
	for j := j0; j < len(a); j++ {
		dst[j] = T(a[j]*b[j]) + T(c[j]*d[j])
	}
}

// mul32 and mulAddMul32 are the assembly kernels where the CPU has them:
// each does the first elements (a multiple of its vector width) and
// returns how many.
var (
	mul32       func(dst, a, b []float32) int
	mulAddMul32 func(dst, a, b, c, d []float32) int
)
