package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestAdd checks Add against the one-rounding sum float32(a)+float32(b)
// element by element (exact: IEEE 754 addition rounds once, so every kernel
// must give these bits), on lengths around the vector widths.
func TestAdd(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	for _, n := range []int{0, 1, 15, 16, 17, 63, 64, 65, 200, 1024} {
		x, d := make([]float32, n), make([]float32, n+3)
		for i := range x {
			x[i] = float32(rng.NormFloat64())
		}
		for i := range d {
			d[i] = float32(rng.NormFloat64() * 100)
		}
		want := append([]float32(nil), d...)
		for i := range x {
			want[i] = want[i] + x[i]
		}
		Add(d, x)
		for i := range d {
			if math.Float32bits(d[i]) != math.Float32bits(want[i]) {
				t.Fatalf("n=%d: dst[%d] got %v want %v", n, i, d[i], want[i])
			}
		}
	}
	// float64 takes the Go loop.
	d64 := []float64{1, 2}
	Add(d64, []float64{0.5, -2})
	if d64[0] != 1.5 || d64[1] != 0 {
		t.Errorf("float64: got %v want [1.5 0]", d64)
	}
}
