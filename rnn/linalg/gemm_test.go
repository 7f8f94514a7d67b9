package linalg

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// gemmTolEps is the error bound of a computed element of C in units of
// k·eps·(|alpha|·Σ_l |a_il||b_lj| + |beta|·|c_ij|): the standard forward
// error bound of a dot product of length k is k·eps·Σ|a||b| (Higham,
// "Accuracy and Stability of Numerical Algorithms", 2nd ed., eq. 3.5); the
// factor 2 leaves room for the alpha and beta roundings.
const gemmTolEps = 2.0

// gemmSizes are the dimensions the shape tests draw from: around the tile
// sizes (4, 6, 8, 16, 32), the KC block (256) and odd values.
var gemmSizes = []int{1, 2, 3, 5, 7, 8, 9, 15, 16, 17, 31, 32, 33, 63, 64, 65, 100, 257}

type gemmCase struct {
	tA, tB      bool
	m, n, k     int
	padA, padB  int // extra stride beyond the stored width
	padC        int
	alpha, beta float64
}

func (tc gemmCase) String() string {
	return fmt.Sprintf("tA=%v/tB=%v/%dx%dx%d/pad=%d,%d,%d/alpha=%g/beta=%g", tc.tA, tc.tB, tc.m, tc.n, tc.k, tc.padA, tc.padB, tc.padC, tc.alpha, tc.beta)
}

// gemmCases returns the fixed cases plus count random ones from a seeded
// generator.
func gemmCases(seed uint64, count int) []gemmCase {
	rng := rand.New(rand.NewPCG(seed, 1))
	pick := func() int { return gemmSizes[rng.IntN(len(gemmSizes))] }
	alphas := []float64{1, -1, 0.5, 2.25}
	betas := []float64{0, 1, -0.75, 3}
	var cases []gemmCase
	for _, tA := range []bool{false, true} {
		for _, tB := range []bool{false, true} {
			// Block boundaries: k across KC, m across MC, n across NC.
			for _, s := range [][3]int{{1, 1, 1}, {8, 32, 256}, {9, 33, 257}, {200, 40, 520}, {7, 2100, 3}, {33, 65, 300}} {
				cases = append(cases, gemmCase{tA: tA, tB: tB, m: s[0], n: s[1], k: s[2], padA: 3, padB: 1, padC: 2, alpha: 1, beta: 0.5})
			}
			for i := 0; i < count; i++ {
				tc := gemmCase{tA: tA, tB: tB, m: pick(), n: pick(), k: pick(), alpha: alphas[rng.IntN(len(alphas))], beta: betas[rng.IntN(len(betas))]}
				if rng.IntN(2) == 0 {
					tc.padA, tc.padB, tc.padC = rng.IntN(9), rng.IntN(9), rng.IntN(9)
				}
				cases = append(cases, tc)
			}
		}
	}
	return cases
}

// gemmOperands builds random stored A, B and C for a case.
type gemmOperands[T Float] struct {
	a, b, c       []T
	lda, ldb, ldc int
}

func newOperands[T Float](tc gemmCase, rng *rand.Rand) gemmOperands[T] {
	ar, ac := tc.m, tc.k
	if tc.tA {
		ar, ac = tc.k, tc.m
	}
	br, bc := tc.k, tc.n
	if tc.tB {
		br, bc = tc.n, tc.k
	}
	o := gemmOperands[T]{lda: ac + tc.padA, ldb: bc + tc.padB, ldc: tc.n + tc.padC}
	fill := func(rows, ld int) []T {
		s := make([]T, rows*ld)
		for i := range s {
			s[i] = T(rng.Float64()*2 - 1)
		}
		return s
	}
	o.a, o.b, o.c = fill(ar, o.lda), fill(br, o.ldb), fill(tc.m, o.ldc)
	return o
}

// checkGemmResult compares got against the float64 naive product of the
// same inputs, element by element, with the gemmTolEps bound; eps is the
// unit roundoff of the type under test.
func checkGemmResult[T Float](t *testing.T, tc gemmCase, o gemmOperands[T], got []T, eps float64) {
	t.Helper()
	f := func(s []T) []float64 {
		d := make([]float64, len(s))
		for i, v := range s {
			d[i] = float64(v)
		}
		return d
	}
	abs := func(s []float64) []float64 {
		d := make([]float64, len(s))
		for i, v := range s {
			d[i] = math.Abs(v)
		}
		return d
	}
	a, b, c := f(o.a), f(o.b), f(o.c)
	want := append([]float64(nil), c...)
	gemmNaive(tc.tA, tc.tB, tc.m, tc.n, tc.k, tc.alpha, a, o.lda, b, o.ldb, tc.beta, want, o.ldc)
	bound := abs(c)
	gemmNaive(tc.tA, tc.tB, tc.m, tc.n, tc.k, math.Abs(tc.alpha), abs(a), o.lda, abs(b), o.ldb, math.Abs(tc.beta), bound, o.ldc)
	bad := 0
	for i := 0; i < tc.m; i++ {
		for j := 0; j < tc.n; j++ {
			x := i*o.ldc + j
			tol := gemmTolEps * float64(tc.k+2) * eps * bound[x]
			if d := math.Abs(float64(got[x]) - want[x]); !(d <= tol) {
				if bad < 5 {
					t.Errorf("C[%d][%d]: got %g want %g (|diff| %g > tol %g)", i, j, got[x], want[x], d, tol)
				}
				bad++
			}
		}
	}
	// Padding columns of C must be untouched.
	for i := 0; i < tc.m; i++ {
		for j := tc.n; j < o.ldc && i*o.ldc+j < len(got); j++ {
			if x := i*o.ldc + j; got[x] != o.c[x] {
				t.Fatalf("C[%d][%d] is padding beyond n=%d: got %g want it unchanged %g", i, j, tc.n, got[x], o.c[x])
			}
		}
	}
	if bad > 0 {
		t.Errorf("%d of %d elements out of tolerance", bad, tc.m*tc.n)
	}
}

const (
	eps32 = 0x1p-24 // unit roundoff of float32
	eps64 = 0x1p-53 // unit roundoff of float64
)

// shortCount is the number of random cases per transpose: fewer in -short
// runs (the race detector), where the fixed block-boundary cases remain.
func shortCount(n int) int {
	if testing.Short() {
		return max(n/4, 1)
	}
	return n
}

func TestGemmKernels32(t *testing.T) {
	cases := gemmCases(7, shortCount(12))
	for _, kern := range kernels32 {
		t.Run("kernel="+kern.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(1, 2))
			for _, tc := range cases {
				o := newOperands[float32](tc, rng)
				got := append([]float32(nil), o.c...)
				gemmRun(nil, kern, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, float32(tc.beta), got, o.ldc)
				t.Run(tc.String(), func(t *testing.T) { checkGemmResult(t, tc, o, got, eps32) })
			}
		})
	}
}

func TestGemm64(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, tc := range gemmCases(8, shortCount(6)) {
		o := newOperands[float64](tc, rng)
		got := append([]float64(nil), o.c...)
		Gemm(nil, tc.tA, tc.tB, tc.m, tc.n, tc.k, tc.alpha, o.a, o.lda, o.b, o.ldb, tc.beta, got, o.ldc)
		t.Run(tc.String(), func(t *testing.T) { checkGemmResult(t, tc, o, got, eps64) })
	}
}

// TestGemmNamedType checks that a type whose underlying type is float32
// takes the float32 path correctly.
func TestGemmNamedType(t *testing.T) {
	type myFloat float32
	a := []myFloat{1, 2, 3, 4, 5, 6} // 2×3
	b := []myFloat{1, 0, 0, 1, 1, 1} // 3×2
	c := make([]myFloat, 4)
	Gemm(nil, false, false, 2, 2, 3, 1, a, 3, b, 2, 0, c, 2)
	want := []myFloat{4, 5, 10, 11} // worked by hand: [1 2 3]·[[1 0][0 1][1 1]] = [4 5]
	for i := range want {
		if c[i] != want[i] {
			t.Fatalf("C[%d]: got %v want %v", i, c[i], want[i])
		}
	}
}

// TestGemmBetaZeroIgnoresC fills C with NaN and Inf: with beta zero they
// must not reach the result.
func TestGemmBetaZeroIgnoresC(t *testing.T) {
	for _, kern := range kernels32 {
		for _, tc := range []gemmCase{{m: 9, n: 33, k: 17, alpha: 1}, {m: 16, n: 64, k: 300, tA: true, tB: true, alpha: -2}, {m: 3, n: 5, k: 0, alpha: 1}} {
			t.Run(kern.name+"/"+tc.String(), func(t *testing.T) {
				rng := rand.New(rand.NewPCG(5, 6))
				o := newOperands[float32](tc, rng)
				for i := range o.c {
					o.c[i] = float32(math.NaN())
					if i%3 == 0 {
						o.c[i] = float32(math.Inf(-1))
					}
				}
				got := append([]float32(nil), o.c...)
				gemmRun(nil, kern, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, 0, got, o.ldc)
				for i := range o.c {
					o.c[i] = 0
				}
				checkGemmResult(t, tc, o, got, eps32)
			})
		}
	}
}

// TestGemmAlphaZeroIgnoresAB puts NaN in A and B: with alpha zero the result
// is beta·C and A and B are not read (BLAS convention).
func TestGemmAlphaZeroIgnoresAB(t *testing.T) {
	nan := float32(math.NaN())
	a := []float32{nan, nan, nan, nan}
	b := []float32{nan, nan, nan, nan}
	c := []float32{1, 2, 3, 4}
	Gemm(nil, false, false, 2, 2, 2, 0, a, 2, b, 2, 2, c, 2)
	for i, want := range []float32{2, 4, 6, 8} { // 2·C
		if c[i] != want {
			t.Fatalf("C[%d]: got %v want %v", i, c[i], want)
		}
	}
}

func TestGemmPanicsOnBadShape(t *testing.T) {
	cases := []struct {
		name string
		f    func()
	}{
		{"short A", func() {
			Gemm(nil, false, false, 2, 2, 2, 1, make([]float32, 3), 2, make([]float32, 4), 2, 0, make([]float32, 4), 2)
		}},
		{"short C", func() {
			Gemm(nil, false, false, 2, 2, 2, 1, make([]float32, 4), 2, make([]float32, 4), 2, 0, make([]float32, 3), 2)
		}},
		{"stride below width", func() {
			Gemm(nil, false, true, 2, 3, 2, 1, make([]float32, 4), 2, make([]float32, 6), 1, 0, make([]float32, 6), 3)
		}},
		{"negative m", func() {
			Gemm(nil, false, false, -1, 2, 2, 1, make([]float64, 4), 2, make([]float64, 4), 2, 0, make([]float64, 4), 2)
		}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Fatalf("got no panic, want one")
				}
			}()
			tc.f()
		})
	}
}

// FuzzGemm draws the shape, transposes, strides and scalars from the fuzz
// input and checks every float32 kernel against the naive product.
func FuzzGemm(f *testing.F) {
	f.Add(uint8(9), uint8(33), uint8(17), uint8(0), uint8(1), uint8(2), uint64(1))
	f.Add(uint8(1), uint8(1), uint8(1), uint8(3), uint8(0), uint8(0), uint64(2))
	f.Add(uint8(65), uint8(7), uint8(255), uint8(2), uint8(5), uint8(7), uint64(3))
	f.Fuzz(func(t *testing.T, m, n, k, flags, padA, padB uint8, seed uint64) {
		tc := gemmCase{
			tA: flags&1 != 0, tB: flags&2 != 0,
			m: int(m%80) + 1, n: int(n%80) + 1, k: int(k) + 1,
			padA: int(padA % 8), padB: int(padB % 8), padC: int(flags>>4) % 8,
			alpha: []float64{1, -0.5}[flags>>2&1], beta: []float64{0, 1.5}[flags>>3&1],
		}
		rng := rand.New(rand.NewPCG(seed, 9))
		o := newOperands[float32](tc, rng)
		for _, kern := range kernels32 {
			got := append([]float32(nil), o.c...)
			gemmRun(nil, kern, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, float32(tc.beta), got, o.ldc)
			checkGemmResult(t, tc, o, got, eps32)
		}
	})
}
