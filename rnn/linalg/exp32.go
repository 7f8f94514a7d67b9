package linalg

import "math"

// float32 exp, sigmoid and tanh.
//
// Method (Cody and Waite range reduction with a minimax polynomial, as in
// S. L. Moshier's Cephes library, files expf.c and tanhf.c, "Methods and
// Programs for Mathematical Functions", 1989). The coefficients below were
// written from memory of Cephes; exp32_test.go checks them on their own
// against package math over the whole reduced range, in float64: the exp
// polynomial is within 1.10e-9 relative of e^r for |r| ≤ ln2/2 and the
// tanh polynomial within 4.39e-9 of tanh x for |x| < 0.625, far below half
// a float32 ulp (2^-24 ≈ 6e-8):
//
//	exp(x)  = 2^n · exp(r),  n = round(x·log2 e),  r = x − n·C1 − n·C2
//	          with C1 + C2 = ln 2 split so that n·C1 is exact, and
//	exp(r) ≈ 1 + r + r²·P(r), P of degree 5, for |r| ≤ ln2/2;
//	tanh(x) = x + x³·Q(x²), Q of degree 4, for |x| < 0.625,
//	        = sign(x)·(1 − 2/(exp(2|x|) + 1)) otherwise;
//	σ(x)    = 1/(1 + exp(−x)).
//
// All arithmetic is float32. The assembly versions evaluate the same
// formulas with fused multiply-adds: elementwise_amd64.s (AVX-512) applies
// 2^n with VSCALEFPS, elementwise_avx2_amd64.s as two exact power-of-two
// factors; both round subnormal results once (gradual underflow).
// Measured over a sweep of float32 inputs against package math
// (elementwise_test.go, bounds expMaxRelErr, actMaxAbsErr, actMaxRelErr):
// exp relative error ≤ 1.2e-7 where the result is normal; sigmoid and tanh
// absolute error ≤ 1e-7 and relative error ≤ 2e-7.
// Special values: exp(+Inf) = +Inf, exp(−Inf) = 0, results beyond the float32
// range overflow to +Inf or underflow to 0 (here subnormal results are
// computed through float64), NaN gives NaN; σ(±Inf) = 1 or 0, tanh(±Inf) = ±1,
// tanh(±0) = ±0, and NaN gives NaN.

const (
	log2e32 = 1.44269504088896341
	expC1   = 0.693359375       // ln 2 to 9 bits: n·C1 is exact for |n| < 2^15
	expC2   = -2.12194440e-4    // ln 2 − C1
	expP0   = 1.9875691500e-4   // Cephes expf.c coefficients
	expP1   = 1.3981999507e-3   //
	expP2   = 8.3334519073e-3   //
	expP3   = 4.1665795894e-2   //
	expP4   = 1.6666665459e-1   //
	expP5   = 5.0000001201e-1   //
	tanhQ0  = -5.70498872745e-3 // Cephes tanhf.c coefficients
	tanhQ1  = 2.06390887954e-2  //
	tanhQ2  = -5.37397155531e-2 //
	tanhQ3  = 1.33314422036e-1  //
	tanhQ4  = -3.33332819422e-1 //

	// expHi and expLo bound the inputs whose exp is a normal float32:
	// exp(88.37) < 2^127.5 and exp(−87.33) > 2^−126 (2^−126 = exp(−87.336)).
	expHi = 88.37
	expLo = -87.33
)

// exp32 returns e^x in float32; see the comment at the top of this file.
func exp32(x float32) float32 {
	if !(x >= expLo && x <= expHi) {
		return expSlow(x)
	}
	t := x*log2e32 + 0.5
	n := int32(t)
	if float32(n) > t {
		n-- // floor for negative t
	}
	fn := float32(n)
	r := x - fn*expC1
	r -= fn * expC2
	p := ((((expP0*r+expP1)*r+expP2)*r+expP3)*r+expP4)*r + expP5
	p = p*(r*r) + r + 1
	return p * math.Float32frombits(uint32(n+127)<<23)
}

// expSlow handles the inputs outside [expLo, expHi]: NaN, overflow,
// underflow and subnormal results.
func expSlow(x float32) float32 {
	switch {
	case x != x:
		return x
	case x > 88.73: // exp(88.7228) is the largest float32
		return float32(math.Inf(1))
	case x < -104: // exp(−104) < 2^−150 rounds to 0
		return 0
	}
	return float32(math.Exp(float64(x)))
}

// sigmoid32 returns 1/(1 + e^−x) in float32.
func sigmoid32(x float32) float32 {
	return 1 / (1 + exp32(-x))
}

// tanh32 returns tanh(x) in float32.
func tanh32(x float32) float32 {
	ax := x
	if ax < 0 {
		ax = -ax
	}
	if ax < 0x1p-12 { // x³/3 is below half an ulp of x: tanh(x) rounds to x (keeps −0)
		return x
	}
	if ax < 0.625 {
		z := x * x
		q := (((tanhQ0*z+tanhQ1)*z+tanhQ2)*z+tanhQ3)*z + tanhQ4
		return x + x*z*q
	}
	if ax > 9.1 { // 1 − tanh(9.1) < 2^−25: rounds to 1
		if x != x {
			return x
		}
		return math.Float32frombits(math.Float32bits(x)&0x80000000 | 0x3f800000)
	}
	y := 1 - 2/(exp32(2*ax)+1)
	if x < 0 {
		y = -y
	}
	return y
}

// vecImpl is one implementation of the float32 slice kernels.
type vecImpl struct {
	name               string
	exp, sigmoid, tanh func(dst, x []float32)
	expShiftSum        func(dst, x []float32, shift float32) float64 // dst = e^(x−shift), returns Σ dst in float64
	max                func(x []float32) float32                     // largest element, NaNs skipped, −Inf if empty
	scale              func(x []float32, s float32)                  // x *= s
}

// vecImpls lists the implementations this CPU can run, fastest first; the
// pure-Go one is always last. The kernels use the first.
var vecImpls = append(archVecImpls(), vecGo)

func vec() *vecImpl { return vecImpls[0] }

var vecGo = &vecImpl{
	name:        "go",
	exp:         expSliceGo,
	sigmoid:     sigmoidSliceGo,
	tanh:        tanhSliceGo,
	expShiftSum: expShiftSumGo,
	max:         maxGo,
	scale:       scaleGo,
}

func maxGo(x []float32) float32 {
	mx := float32(math.Inf(-1))
	for _, v := range x {
		if v > mx {
			mx = v
		}
	}
	return mx
}

func scaleGo(x []float32, s float32) {
	for i := range x {
		x[i] *= s
	}
}

func expSliceGo(dst, x []float32) {
	dst = dst[:len(x)]
	for i, v := range x {
		dst[i] = exp32(v)
	}
}

func sigmoidSliceGo(dst, x []float32) {
	dst = dst[:len(x)]
	for i, v := range x {
		dst[i] = sigmoid32(v)
	}
}

func tanhSliceGo(dst, x []float32) {
	dst = dst[:len(x)]
	for i, v := range x {
		dst[i] = tanh32(v)
	}
}

func expShiftSumGo(dst, x []float32, shift float32) float64 {
	dst = dst[:len(x)]
	var sum float64
	for i, v := range x {
		e := exp32(v - shift)
		dst[i] = e
		sum += float64(e)
	}
	return sum
}
