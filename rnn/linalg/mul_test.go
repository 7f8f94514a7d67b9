package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestMulAddMul: Mul and MulAddMul on float32 slices of every length up to
// 100 (whole vectors and tails), against each operation rounded on its own,
// computed independently in float64 and rounded to float32 (exact here: a
// product of two float32 values fits a float64, and a float64 sum rounded
// to float32 is the float32 sum, 53 ≥ 2·24 + 2 bits: double rounding is
// innocuous, Figueroa 1995, "When is double rounding innocuous?").
func TestMulAddMul(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	r32 := func() float32 { return float32(rng.NormFloat64() * math.Pow(2, float64(rng.IntN(40)-20))) }
	for n := 0; n <= 100; n++ {
		a, b, c, d := make([]float32, n), make([]float32, n), make([]float32, n), make([]float32, n)
		for i := range a {
			a[i], b[i], c[i], d[i] = r32(), r32(), r32(), r32()
		}
		got, got2 := make([]float32, n), make([]float32, n)
		Mul(got, a, b)
		MulAddMul(got2, a, b, c, d)
		for i := range a {
			p := float32(float64(a[i]) * float64(b[i]))
			q := float32(float64(c[i]) * float64(d[i]))
			want2 := float32(float64(p) + float64(q))
			if math.Float32bits(got[i]) != math.Float32bits(p) {
				t.Fatalf("Mul n=%d i=%d: got %v, want %v", n, i, got[i], p)
			}
			if math.Float32bits(got2[i]) != math.Float32bits(want2) {
				t.Fatalf("MulAddMul n=%d i=%d: got %v, want %v (each operation rounded)", n, i, got2[i], want2)
			}
		}
	}
	// float64 takes the Go loop.
	got := make([]float64, 3)
	MulAddMul(got, []float64{1, 2, 3}, []float64{4, 5, 6}, []float64{0.5, 0.25, 2}, []float64{2, 4, -9})
	for i, want := range []float64{5, 11, 0} {
		if got[i] != want {
			t.Errorf("float64 element %d: got %v, want %v", i, got[i], want)
		}
	}
}
