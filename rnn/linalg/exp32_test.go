package linalg

import (
	"math"
	"testing"
)

// TestExpTanhPolynomials checks the polynomial coefficients of exp32.go
// on their own, in float64 so that only the approximation error counts,
// against package math over the whole reduced range each is used on: the
// exp polynomial 1 + r + r²·P(r) for |r| ≤ ln2/2 (what remains of any
// float32 input after the Cody-Waite reduction), and the tanh polynomial
// x + x³·Q(x²) for 0 < |x| < 0.625 (odd, so one sign suffices). The grid
// has 2,000,001 points, a spacing of 3.5e-7 and 3.1e-7, fine enough to
// resolve the smooth error curve of a degree-5 fit.
//
// Measured maxima: 1.10e-9 relative for exp (at r ≈ -0.289) and 4.39e-9
// for tanh (at x ≈ 0.603), both far below half a float32 ulp, 2^-24 ≈
// 6e-8: the float32 kernels' error (TestExp32Accuracy,
// TestActivation32Accuracy) is rounding, not the fit. A coefficient off
// in its fourth digit raises these errors by orders of magnitude.
func TestExpTanhPolynomials(t *testing.T) {
	const (
		expPolyMaxRel  = 2e-9 // measured 1.10e-9
		tanhPolyMaxRel = 6e-9 // measured 4.39e-9
		points         = 2000000
	)
	P := []float64{expP0, expP1, expP2, expP3, expP4, expP5}
	Q := []float64{tanhQ0, tanhQ1, tanhQ2, tanhQ3, tanhQ4}
	horner := func(c []float64, x float64) float64 {
		p := 0.0
		for _, ci := range c {
			p = p*x + ci
		}
		return p
	}
	h := math.Ln2 / 2
	var maxExp, atExp float64
	for i := 0; i <= points; i++ {
		r := -h + 2*h*float64(i)/points
		got := 1 + r + r*r*horner(P, r)
		if e := math.Abs(got-math.Exp(r)) / math.Exp(r); e > maxExp {
			maxExp, atExp = e, r
		}
	}
	var maxTanh, atTanh float64
	for i := 1; i <= points; i++ {
		x := 0.625 * float64(i) / points
		z := x * x
		got := x + x*z*horner(Q, z)
		if e := math.Abs(got-math.Tanh(x)) / math.Tanh(x); e > maxTanh {
			maxTanh, atTanh = e, x
		}
	}
	t.Logf("exp polynomial: max relative error %.3g at r=%.6f; tanh polynomial: %.3g at x=%.6f", maxExp, atExp, maxTanh, atTanh)
	if maxExp > expPolyMaxRel {
		t.Errorf("exp polynomial: max relative error %g at r=%g, want <= %g", maxExp, atExp, expPolyMaxRel)
	}
	if maxTanh > tanhPolyMaxRel {
		t.Errorf("tanh polynomial: max relative error %g at x=%g, want <= %g", maxTanh, atTanh, tanhPolyMaxRel)
	}
	// The Cody-Waite split: C1 + C2 is ln 2 to float32 precision and C1
	// has 9 significant bits, so n·C1 is exact in float32 for |n| < 2^15
	// (n ≤ 150 here).
	if d := math.Abs(float64(float32(expC1)+float32(expC2)) - math.Ln2); d > 0x1p-24*math.Ln2 {
		t.Errorf("C1 + C2 = %g differs from ln 2 by %g", float64(float32(expC1)+float32(expC2)), d)
	}
	if m := math.Float32bits(expC1) & (1<<23 - 1); m&(1<<(23-8)-1) != 0 {
		t.Errorf("C1 = %g has more than 9 significant bits (mantissa %023b)", expC1, m)
	}
}
