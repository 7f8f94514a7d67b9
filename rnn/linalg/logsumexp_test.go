package linalg

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestExpShift64: the AVX-512 kernel gives package math's Exp bit for bit
// (the reference: Go's own math.Exp, whose amd64 code the kernel runs lane
// by lane), over every 37th float32 bit pattern in its range with several
// shifts, and stops at the first group holding an argument out of range.
func TestExpShift64(t *testing.T) {
	if !haveExpShift64 {
		t.Skip("no AVX-512 on this CPU: LogSumExp calls math.Exp itself")
	}
	if !useExpShift64 {
		t.Fatal("the kernel disagreed with math.Exp at start-up and was switched off (did math.Exp change?)")
	}
	var xs []float32
	for bits := uint64(0); bits < 1<<31; bits += uint64(sweepStride()) {
		x := math.Float32frombits(uint32(bits))
		if x <= 700 {
			xs = append(xs, x, -x)
		}
	}
	for _, b := range []float32{-708, 709, -707.9999, 708.99994, 0, 1e-30, 1e-45} {
		xs = append(xs, b, math.Nextafter32(b, 0))
	}
	for len(xs)%8 != 0 {
		xs = append(xs, 0)
	}
	dst := make([]float64, len(xs))
	for _, shift := range []float64{0, 3.5, -2.75, 1e-3} {
		var in []float32
		for _, x := range xs {
			if v := float64(x) - shift; v >= -708 && v <= 709 {
				in = append(in, x)
			}
		}
		in = in[:len(in)&^7]
		if n := expShift64(dst, in, shift); n != len(in) {
			t.Fatalf("shift %v: the kernel did %d of %d arguments in range", shift, n, len(in))
		}
		bad := 0
		for i, x := range in {
			if want := math.Exp(float64(x) - shift); math.Float64bits(dst[i]) != math.Float64bits(want) {
				if bad++; bad <= 5 {
					t.Errorf("shift %v: exp(%v) got %v (%#x), want math.Exp's %v (%#x)", shift, float64(x)-shift, dst[i], math.Float64bits(dst[i]), want, math.Float64bits(want))
				}
			}
		}
		if bad > 0 {
			t.Errorf("shift %v: %d of %d differ", shift, bad, len(in))
		}
	}
	for _, out := range []float32{-708.5, 709.5, float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
		x := []float32{1, 2, 3, 4, 5, 6, 7, 8, 0, 0, 0, out, 0, 0, 0, 0}
		if n := expShift64(dst, x, 0); n != 8 {
			t.Errorf("argument %v in the second group: the kernel did %d, want 8", out, n)
		}
	}
}

// lseRef is LogSumExp written out with math.Exp for each term in order:
// the evaluation LogSumExp documents, as the scoring code computed it
// before the kernel.
func lseRef(x []float64) float64 {
	mx := math.Inf(-1)
	for _, v := range x {
		mx = math.Max(mx, v)
	}
	var s float64
	for _, v := range x {
		s += math.Exp(v - mx)
	}
	return mx + math.Log(s)
}

// TestLogSumExp: float32 and float64 rows of every length up to 300 and of
// vocabulary sizes, ordinary and wide-ranged (terms that underflow, groups
// the kernel hands back), and the special values, against lseRef bit for
// bit (NaN against NaN); and the worked value ln Σ exp(0) over n terms = ln n.
func TestLogSumExp(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 19))
	inf, nan := math.Inf(1), math.NaN()
	var rows [][]float64
	for _, n := range []int{0, 1, 2, 7, 8, 9, 15, 16, 17, 73, 96, 127, 128, 129, 255, 256, 300, 1000, 10000} {
		for _, spread := range []float64{1, 10, 400, 2000} {
			row := make([]float64, n)
			for i := range row {
				row[i] = float64(float32(rng.NormFloat64() * spread))
			}
			rows = append(rows, row)
		}
	}
	negz := math.Copysign(0, -1)
	rows = append(rows,
		[]float64{negz, 0, negz}, []float64{negz, negz}, []float64{-inf, -inf}, []float64{inf, 1},
		[]float64{1, nan, 2}, []float64{nan}, []float64{-inf, 0, -inf, 3, 4, 5, 6, 7, 8, 9},
		[]float64{3.4e38, -3.4e38, 0, 0, 0, 0, 0, 0, 0},
	)
	for _, row := range rows { // every value a float32, so that both forms score the same row
		for j, v := range row {
			row[j] = float64(float32(v))
		}
	}
	same := func(a, b float64) bool {
		return math.Float64bits(a) == math.Float64bits(b) || math.IsNaN(a) && math.IsNaN(b)
	}
	for i, row := range rows {
		want := lseRef(row)
		if got := LogSumExp(row); !same(got, want) {
			t.Errorf("float64 row %d (%d values): got %v, want %v", i, len(row), got, want)
		}
		r32 := make([]float32, len(row))
		for j, v := range row {
			r32[j] = float32(v)
		}
		if got := LogSumExp(r32); !same(got, want) {
			t.Errorf("float32 row %d (%d values): got %v, want %v", i, len(row), got, want)
		}
	}
	for _, n := range []int{1, 8, 96, 1000} {
		// Common fact: n equal terms e^0 sum to n.
		if got, want := LogSumExp(make([]float32, n)), math.Log(float64(n)); got != want {
			t.Errorf("ln Σ of %d zeros: got %v, want ln %d = %v", n, got, n, want)
		}
	}
}

// BenchmarkLogSumExp: a row of a character vocabulary, the kernel against
// math.Exp term by term (lseRef's loop on float32).
func BenchmarkLogSumExp(b *testing.B) {
	row := make([]float32, 96)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range row {
		row[i] = float32(rng.NormFloat64() * 3)
	}
	for _, impl := range []string{"kernel", "math.Exp"} {
		b.Run("V=96/"+impl, func(b *testing.B) {
			k := useExpShift64
			if impl == "math.Exp" {
				useExpShift64 = false
			}
			defer func() { useExpShift64 = k }()
			var s float64
			for i := 0; i < b.N; i++ {
				s += LogSumExp(row)
			}
			lseSink = s
		})
	}
}

var lseSink float64
