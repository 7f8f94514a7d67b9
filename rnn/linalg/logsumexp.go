package linalg

import "math"

// LogSumExp returns ln Σ_i exp(x[i]) in float64, evaluated as
//
//	m = max_i x[i] (found by comparisons; NaNs skipped; −Inf when empty)
//	s = ((e_0 + e_1) + e_2) + …,  e_i = math.Exp(float64(x[i]) − m)
//	LogSumExp(x) = m + math.Log(s)
//
// with the terms added one by one in index order, so that the result has
// the same bits on every path that calls it, whatever the kernel. A NaN
// anywhere in x gives NaN.
//
// On amd64 with AVX-512 the float32 form computes eight terms at a time
// with the instructions math.Exp runs for one (Go's exp_amd64.s, the
// fused multiply-add branch that math.Exp takes on every CPU with
// AVX-512), so each e_i has math.Exp's bits; a group of eight with an
// argument outside [−708, 709] (where math.Exp's result is subnormal,
// infinite or NaN, or its arithmetic takes another branch) is handed to
// math.Exp itself. TestExpShift64 checks the kernel against math.Exp bit
// for bit, and the kernel is switched off at start-up if a sample of
// arguments disagrees (a Go release that changed math.Exp).
func LogSumExp[T Float](x []T) float64 {
	if isF32[T]() {
		return logSumExp32(as32(x))
	}
	mx := math.Inf(-1)
	for _, v := range x {
		if f := float64(v); f > mx {
			mx = f
		}
	}
	var s float64
	for _, v := range x {
		s += math.Exp(float64(v) - mx)
	}
	return mx + math.Log(s)
}

// lseChunk is the number of terms logSumExp32 computes before adding them.
const lseChunk = 128

func logSumExp32(x []float32) float64 {
	mx := float64(vec().max(x))
	var buf [lseChunk]float64
	var s float64
	for len(x) > 0 {
		n := min(len(x), lseChunk)
		expShift(buf[:n], x[:n], mx)
		for _, e := range buf[:n] {
			s += e
		}
		x = x[n:]
	}
	return mx + math.Log(s)
}

// expShift sets dst[i] = math.Exp(float64(x[i]) − shift), bit for bit.
func expShift(dst []float64, x []float32, shift float64) {
	dst = dst[:len(x)]
	i := 0
	for i < len(x) {
		e := len(x)
		if useExpShift64 {
			i += expShift64(dst[i:], x[i:], shift)
			// The group the kernel stopped at: an argument out of its
			// range, or fewer than eight left.
			e = min(i+8, len(x))
		}
		for ; i < e; i++ {
			dst[i] = math.Exp(float64(x[i]) - shift)
		}
	}
}

// useExpShift64 says whether expShift64, the assembly kernel, runs: where
// the CPU has one and it agrees with math.Exp (see expShiftAgrees). The
// kernel computes dst[i] = exp(float64(x[i]) − shift) for whole groups of
// eight from the start while every argument of a group is in its range,
// and returns how many it did.
var useExpShift64 bool

// expShiftAgrees reports whether the kernel k gives math.Exp's bits on a
// sample of arguments across its range (and stops at one outside it).
func expShiftAgrees(k func(dst []float64, x []float32, shift float64) int) bool {
	x := make([]float32, 0, 1024)
	for i := 0; i < 1000; i++ {
		// Arguments from −700 to 2, unevenly spaced.
		x = append(x, float32(-700*math.Pow(float64(i)/999, 3)+0.37*float64(i%7)))
	}
	for len(x)%8 != 0 {
		x = append(x, 0.5)
	}
	dst := make([]float64, len(x))
	for _, shift := range []float64{0, 1.5, -3.25} {
		if k(dst, x, shift) != len(x) {
			return false
		}
		for i, v := range x {
			if math.Float64bits(dst[i]) != math.Float64bits(math.Exp(float64(v)-shift)) {
				return false
			}
		}
	}
	// A group with an argument out of range is left alone.
	y := []float32{0, 1, 2, 3, 4, 5, 6, -800}
	return k(dst[:8], y, 0) == 0
}
