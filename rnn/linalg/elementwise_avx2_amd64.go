package linalg

import "math"

// Assembly in elementwise_avx2_amd64.s. Each function processes the whole
// vectors of 8 in its input; the wrappers below pass the rest through a
// padded buffer on the stack, so that every element takes the same
// instructions.

//go:noescape
func expAVX2(dst, src *float32, n int)

//go:noescape
func sigmoidAVX2(dst, src *float32, n int)

//go:noescape
func tanhAVX2(dst, src *float32, n int)

//go:noescape
func expShiftSumAVX2(dst, src *float32, n int, shift float32) float64

//go:noescape
func maxAVX2(x *float32, n int) float32

//go:noescape
func scaleAVX2(x *float32, n int, s float32)

var vecAVX2 = &vecImpl{
	name:        "avx2",
	exp:         expSliceAVX2,
	sigmoid:     sigmoidSliceAVX2,
	tanh:        tanhSliceAVX2,
	expShiftSum: expShiftSumSliceAVX2,
	max:         maxSliceAVX2,
	scale:       scaleSliceAVX2,
}

func expSliceAVX2(dst, x []float32) {
	n := len(x)
	if n == 0 {
		return
	}
	_ = dst[n-1]
	if n8 := n &^ 7; n8 > 0 {
		expAVX2(&dst[0], &x[0], n8)
	}
	if r := n & 7; r > 0 {
		var buf [8]float32
		copy(buf[:], x[n-r:])
		expAVX2(&buf[0], &buf[0], 8)
		copy(dst[n-r:], buf[:r])
	}
}

func sigmoidSliceAVX2(dst, x []float32) {
	n := len(x)
	if n == 0 {
		return
	}
	_ = dst[n-1]
	if n8 := n &^ 7; n8 > 0 {
		sigmoidAVX2(&dst[0], &x[0], n8)
	}
	if r := n & 7; r > 0 {
		var buf [8]float32
		copy(buf[:], x[n-r:])
		sigmoidAVX2(&buf[0], &buf[0], 8)
		copy(dst[n-r:], buf[:r])
	}
}

func tanhSliceAVX2(dst, x []float32) {
	n := len(x)
	if n == 0 {
		return
	}
	_ = dst[n-1]
	if n8 := n &^ 7; n8 > 0 {
		tanhAVX2(&dst[0], &x[0], n8)
	}
	if r := n & 7; r > 0 {
		var buf [8]float32
		copy(buf[:], x[n-r:])
		tanhAVX2(&buf[0], &buf[0], 8)
		copy(dst[n-r:], buf[:r])
	}
}

// expShiftSumSliceAVX2 pads the tail with −Inf, whose exponential is 0.
func expShiftSumSliceAVX2(dst, x []float32, shift float32) float64 {
	n := len(x)
	if n == 0 {
		return 0
	}
	_ = dst[n-1]
	var sum float64
	if n8 := n &^ 7; n8 > 0 {
		sum = expShiftSumAVX2(&dst[0], &x[0], n8, shift)
	}
	if r := n & 7; r > 0 {
		buf := [8]float32{}
		for i := range buf {
			buf[i] = float32(math.Inf(-1))
		}
		copy(buf[:], x[n-r:])
		sum += expShiftSumAVX2(&buf[0], &buf[0], 8, shift)
		copy(dst[n-r:], buf[:r])
	}
	return sum
}

func maxSliceAVX2(x []float32) float32 {
	n := len(x)
	mx := float32(math.Inf(-1))
	if n8 := n &^ 7; n8 > 0 {
		mx = maxAVX2(&x[0], n8)
	}
	for _, v := range x[n&^7:] {
		if v > mx {
			mx = v
		}
	}
	return mx
}

func scaleSliceAVX2(x []float32, s float32) {
	n := len(x)
	if n8 := n &^ 7; n8 > 0 {
		scaleAVX2(&x[0], n8, s)
	}
	for i := n &^ 7; i < n; i++ {
		x[i] *= s
	}
}
