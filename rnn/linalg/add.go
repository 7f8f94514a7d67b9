package linalg

// Add sets dst[i] += x[i] for i < len(x), one rounding per element, so the
// result is the same bits whichever kernel runs (AVX-512 on amd64 where the
// CPU has it, a Go loop elsewhere). dst must be at least as long as x.
func Add[T Float](dst, x []T) {
	dst = dst[:len(x)]
	j0 := 0
	if isF32[T]() && add32 != nil {
		j0 = add32(as32(dst), as32(x))
	}
	for j := j0; j < len(x); j++ {
		dst[j] += x[j]
	}
}

// add32 is the assembly kernel where the CPU has one: it adds the first
// elements (a multiple of its vector width) and returns how many.
var add32 func(dst, x []float32) int
