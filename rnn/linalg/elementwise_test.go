package linalg

import (
	"math"
	"testing"
)

// Accuracy bounds of the float32 kernels against package math in float64.
// Measured maxima (sweep of every 37th float32, both signs): exp 8.1e-8
// relative; sigmoid 8.9e-8 absolute, 1.5e-7 relative; tanh 7.8e-8 absolute,
// 1.4e-7 relative. The bounds add a margin and are stated in exp32.go.
const (
	expMaxRelErr = 1.2e-7 // exp32 relative error where e^x is a normal float32 (about 1 ulp, 2^-23)
	actMaxRelErr = 2e-7   // sigmoid32 and tanh32 relative error where the result is normal
	actMaxAbsErr = 1e-7   // sigmoid32 and tanh32 absolute error
)

// sweep32 calls check for every stride-th float32 bit pattern, both
// signs, plus the values next to each boundary of the kernels' branches,
// with the result of the slice kernel fn, evaluated in chunks of varied
// length so that the vector tails are exercised too.
func sweep32(stride uint32, fn func(dst, x []float32), check func(x, got float32)) {
	var xs []float32
	for bits := uint64(0); bits < 1<<31; bits += uint64(stride) {
		x := math.Float32frombits(uint32(bits))
		xs = append(xs, x, -x)
	}
	for _, b := range []float32{expHi, expLo, 88.72, 88.73, -103.9, -104, 0.625, 9.1, 1e-30, 1e-45} {
		for _, x := range []float32{b, math.Nextafter32(b, 0), math.Nextafter32(b, 1000)} {
			xs = append(xs, x, -x)
		}
	}
	got := make([]float32, len(xs))
	for lo, n := 0, 1; lo < len(xs); lo, n = lo+n, n%4099+1 {
		hi := min(lo+n, len(xs))
		fn(got[lo:hi], xs[lo:hi])
	}
	for i, x := range xs {
		check(x, got[i])
	}
}

// sweepStride is prime, so the sweep covers all exponents and varied
// mantissas: 2^31/509 ≈ 4.2 million inputs of each sign. With -short (the
// race-detector run) the sweep takes every 50021st, about 43,000 of each sign.
func sweepStride() uint32 {
	if testing.Short() {
		return 50021
	}
	return 509
}

func TestExp32Accuracy(t *testing.T) {
	for _, impl := range vecImpls {
		t.Run("impl="+impl.name, func(t *testing.T) {
			var maxRel float64
			var worst float32
			sweep32(sweepStride(), impl.exp, func(x, got32 float32) {
				got := float64(got32)
				want := math.Exp(float64(x)) // reference: package math in float64
				if math.IsNaN(float64(x)) {
					return
				}
				if want > math.MaxFloat32*(1+0x1p-25) {
					if !math.IsInf(got, 1) {
						t.Fatalf("exp(%g): got %g want +Inf (overflow)", x, got)
					}
					return
				}
				if want < 0x1p-126 { // subnormal or zero result: absolute check
					if d := math.Abs(got - want); d > 0x1p-149 {
						t.Fatalf("exp(%g): got %g want %g (subnormal, |diff| %g > 2^-149)", x, got, want, d)
					}
					return
				}
				if rel := math.Abs(got-want) / want; rel > maxRel {
					maxRel, worst = rel, x
				}
			})
			t.Logf("exp: max relative error %.3g at x=%g", maxRel, worst)
			if maxRel > expMaxRelErr {
				t.Errorf("exp: max relative error %g at x=%g, want <= %g", maxRel, worst, expMaxRelErr)
			}
		})
	}
}

func TestActivation32Accuracy(t *testing.T) {
	for _, impl := range vecImpls {
		cases := []struct {
			name string
			f    func(dst, x []float32)
			ref  func(float64) float64
		}{
			{"sigmoid", impl.sigmoid, func(x float64) float64 { return 1 / (1 + math.Exp(-x)) }}, // reference: definition in float64
			{"tanh", impl.tanh, math.Tanh}, // reference: package math in float64
		}
		for _, tc := range cases {
			t.Run("impl="+impl.name+"/fn="+tc.name, func(t *testing.T) {
				var maxAbs, maxRel float64
				var worstAbs, worstRel float32
				sweep32(sweepStride(), tc.f, func(x, got32 float32) {
					if x != x {
						return
					}
					got := float64(got32)
					want := tc.ref(float64(x))
					d := math.Abs(got - want)
					if d > maxAbs {
						maxAbs, worstAbs = d, x
					}
					if math.Abs(want) >= 0x1p-126 {
						if rel := d / math.Abs(want); rel > maxRel {
							maxRel, worstRel = rel, x
						}
					} else if d > 0x1p-126 {
						// Subnormal results may flush to zero (σ(x) for x < −88.72).
						t.Fatalf("%s(%g): got %g want %g (|diff| %g > 2^-126)", tc.name, x, got, want, d)
					}
				})
				t.Logf("%s: max abs error %.3g at x=%g, max rel error %.3g at x=%g", tc.name, maxAbs, worstAbs, maxRel, worstRel)
				if maxAbs > actMaxAbsErr {
					t.Errorf("%s: max abs error %g at x=%g, want <= %g", tc.name, maxAbs, worstAbs, actMaxAbsErr)
				}
				if maxRel > actMaxRelErr {
					t.Errorf("%s: max rel error %g at x=%g, want <= %g", tc.name, maxRel, worstRel, actMaxRelErr)
				}
			})
		}
	}
}

// TestExpShiftSum checks the softmax helper of every implementation against
// float64 sums of math.Exp, for lengths around the vector width.
func TestExpShiftSum(t *testing.T) {
	for _, impl := range vecImpls {
		for _, n := range []int{0, 1, 15, 16, 17, 33, 1000} {
			x := make([]float32, n)
			for i := range x {
				x[i] = float32(i%13) - 6.5
			}
			dst := make([]float32, n)
			got := impl.expShiftSum(dst, x, 2.5)
			var want float64
			for i, v := range x {
				e := math.Exp(float64(v) - 2.5) // reference: package math
				want += e
				if math.Abs(float64(dst[i])-e) > expMaxRelErr*e*2 {
					t.Fatalf("%s n=%d: dst[%d] got %g want %g", impl.name, n, i, dst[i], e)
				}
			}
			if math.Abs(got-want) > 2*expMaxRelErr*want {
				t.Errorf("%s n=%d: sum got %.9g want %.9g", impl.name, n, got, want)
			}
		}
	}
}

// TestElementwiseSpecialValues checks signed zeros, infinities, NaN and the
// overflow and underflow limits (IEEE 754 limits of e^x, σ and tanh).
func TestElementwiseSpecialValues(t *testing.T) {
	inf, nan := float32(math.Inf(1)), float32(math.NaN())
	negZero := float32(math.Copysign(0, -1))
	same := func(a, b float32) bool {
		return math.Float32bits(a) == math.Float32bits(b) || (a != a && b != b)
	}
	type fn = func(dst, x []float32)
	var exp, sigmoid, tanh fn
	cases := []struct {
		name string
		f    *fn
		x    float32
		want float32
	}{
		{"exp", &exp, 0, 1},
		{"exp", &exp, negZero, 1},
		{"exp", &exp, inf, inf},
		{"exp", &exp, -inf, 0},
		{"exp", &exp, 89, inf},            // e^89 > MaxFloat32
		{"exp", &exp, -104, 0},            // e^-104 < 2^-150
		{"exp", &exp, 1, float32(math.E)}, // rounds to the nearest float32 of e
		{"exp", &exp, nan, nan},
		{"sigmoid", &sigmoid, 0, 0.5},
		{"sigmoid", &sigmoid, inf, 1},
		{"sigmoid", &sigmoid, -inf, 0},
		{"sigmoid", &sigmoid, 100, 1},
		{"sigmoid", &sigmoid, nan, nan},
		{"tanh", &tanh, 0, 0},
		{"tanh", &tanh, negZero, negZero},
		{"tanh", &tanh, inf, 1},
		{"tanh", &tanh, -inf, -1},
		{"tanh", &tanh, 20, 1},
		{"tanh", &tanh, -20, -1},
		{"tanh", &tanh, nan, nan},
	}
	for _, impl := range vecImpls {
		exp, sigmoid, tanh = impl.exp, impl.sigmoid, impl.tanh
		for _, tc := range cases {
			dst := []float32{42}
			(*tc.f)(dst, []float32{tc.x})
			if !same(dst[0], tc.want) {
				t.Errorf("%s: %s(%g): got %g want %g", impl.name, tc.name, tc.x, dst[0], tc.want)
			}
		}
	}
}

// TestElementwiseFloat64 checks that float64 instances call package math.
func TestElementwiseFloat64(t *testing.T) {
	x := []float64{-3, -0.5, 0, 0.25, 7}
	got := make([]float64, len(x))
	Exp(got, x)
	for i, v := range x {
		if got[i] != math.Exp(v) {
			t.Errorf("Exp(%g): got %g want %g", v, got[i], math.Exp(v))
		}
	}
	Tanh(got, x)
	for i, v := range x {
		if got[i] != math.Tanh(v) {
			t.Errorf("Tanh(%g): got %g want %g", v, got[i], math.Tanh(v))
		}
	}
	Sigmoid(got, x)
	for i, v := range x {
		if want := 1 / (1 + math.Exp(-v)); got[i] != want {
			t.Errorf("Sigmoid(%g): got %g want %g", v, got[i], want)
		}
	}
}

// TestElementwiseInPlace checks dst aliasing x.
func TestElementwiseInPlace(t *testing.T) {
	x := []float32{-2, 0, 1.5}
	want := make([]float32, 3)
	Tanh(want, x)
	Tanh(x, x)
	for i := range x {
		if x[i] != want[i] {
			t.Fatalf("in place: got %g want %g", x[i], want[i])
		}
	}
}

// softmaxTorch holds the logits, targets, summed loss and gradient printed by
// testdata/softmax_ce.py (PyTorch 1.13, float64, reduction="sum").
var softmaxTorch = struct {
	logits  []float64
	targets []int
	loss    float64
	grad    []float64
}{
	logits: []float64{
		0.5, -1.25, 3.0, 0.0, 2.5,
		-4.0, 10.0, 9.5, -0.5, 1.0,
		0.1, 0.2, 0.3, 0.4, 0.5,
	},
	targets: []int{2, 0, 4},
	loss:    16.454726392044812,
	grad: []float64{
		0.046834339020786264, 0.0081385877805370873, -0.42944094772573238, 0.02840646254348262, 0.34606155838092645,
		-0.99999948245608483, 0.62240052960262937, 0.37750500382537516, 1.7138700658658609e-05, 7.6810327421706072e-05,
		0.16212034786857321, 0.17917069369265443, 0.19801424004056156, 0.2188395794576791, -0.75814486105946821,
	},
}

// Tolerances of SoftmaxCrossEntropy against the float64 reference.
const (
	softmaxTol64 = 1e-14 // float64 path: a few roundings of values of order 1..10
	softmaxTol32 = 2e-6  // float32 path: float32 inputs and exp32 (rows of 5, values up to 10)
)

func TestSoftmaxCrossEntropyTorch(t *testing.T) {
	ref := softmaxTorch
	rows, cols := 3, 5
	t.Run("float64", func(t *testing.T) {
		grad := make([]float64, rows*cols)
		loss := SoftmaxCrossEntropy(grad, ref.logits, ref.targets, rows, cols, 1)
		if math.Abs(loss-ref.loss) > softmaxTol64*ref.loss {
			t.Errorf("loss: got %.17g want %.17g", loss, ref.loss)
		}
		for i := range grad {
			if math.Abs(grad[i]-ref.grad[i]) > softmaxTol64 {
				t.Errorf("grad[%d]: got %.17g want %.17g", i, grad[i], ref.grad[i])
			}
		}
	})
	t.Run("float32/aliased", func(t *testing.T) {
		logits := make([]float32, rows*cols)
		for i, v := range ref.logits {
			logits[i] = float32(v) // all exact in float32
		}
		const scale = 0.5
		loss := SoftmaxCrossEntropy(logits, logits, ref.targets, rows, cols, scale) // grad aliases logits
		if math.Abs(loss-ref.loss) > softmaxTol32*ref.loss {
			t.Errorf("loss: got %.9g want %.9g", loss, ref.loss)
		}
		for i := range logits {
			if want := scale * ref.grad[i]; math.Abs(float64(logits[i])-want) > softmaxTol32 {
				t.Errorf("grad[%d]: got %.9g want %.9g", i, logits[i], want)
			}
		}
	})
}

// TestSoftmaxCrossEntropyUniform: equal scores over V classes give a loss
// of ln V per row (common fact) and gradient 1/V − onehot; a row with a
// negative target is skipped.
func TestSoftmaxCrossEntropyUniform(t *testing.T) {
	const rows, cols = 4, 10000
	logits := make([]float32, rows*cols)
	for i := range logits {
		logits[i] = 3.25
	}
	grad := make([]float32, len(logits))
	for i := range grad {
		grad[i] = 99
	}
	targets := []int{0, 9999, -1, 17}
	loss := SoftmaxCrossEntropy(grad, logits, targets, rows, cols, 1)
	if want := 3 * math.Log(cols); math.Abs(loss-want) > 1e-9*want {
		t.Errorf("loss: got %.12g want %.12g (3·ln %d)", loss, want, cols)
	}
	for r, tgt := range targets {
		for j := 0; j < cols; j++ {
			want := 1.0 / cols
			switch {
			case tgt < 0:
				want = 0
			case j == tgt:
				want -= 1
			}
			if g := float64(grad[r*cols+j]); math.Abs(g-want) > 1e-7 {
				t.Fatalf("grad[%d][%d]: got %g want %g", r, j, g, want)
			}
		}
	}
}

// TestSoftmaxCrossEntropyNonFinite: a NaN score gives a NaN loss; −Inf
// scores get probability zero.
func TestSoftmaxCrossEntropyNonFinite(t *testing.T) {
	ninf := float32(math.Inf(-1))
	logits := []float32{0, ninf, 0, ninf}
	grad := make([]float32, 4)
	loss := SoftmaxCrossEntropy(grad, logits, []int{0}, 1, 4, 1)
	if want := math.Ln2; math.Abs(loss-want) > 1e-7 { // two equal finite scores: ln 2
		t.Errorf("loss with -Inf scores: got %g want %g", loss, want)
	}
	if grad[1] != 0 || grad[3] != 0 || math.Abs(float64(grad[0])+0.5) > 1e-7 || math.Abs(float64(grad[2])-0.5) > 1e-7 {
		t.Errorf("grad with -Inf scores: got %v want [-0.5 0 0.5 0]", grad)
	}
	logits = []float32{0, float32(math.NaN()), 1}
	if loss := SoftmaxCrossEntropy(make([]float32, 3), logits, []int{2}, 1, 3, 1); !math.IsNaN(loss) {
		t.Errorf("loss with a NaN score: got %g want NaN", loss)
	}
}

// TestMaxScale checks the softmax helpers of every implementation, for
// lengths around the vector width, with the maximum at every position.
func TestMaxScale(t *testing.T) {
	nan := float32(math.NaN())
	for _, impl := range vecImpls {
		if got := impl.max(nil); !math.IsInf(float64(got), -1) {
			t.Errorf("%s: max of nothing: got %g want -Inf", impl.name, got)
		}
		for _, n := range []int{1, 2, 15, 16, 17, 31, 32, 33, 47, 100} {
			for at := 0; at < n; at++ {
				x := make([]float32, n)
				for i := range x {
					x[i] = -float32(i % 7)
				}
				x[(at+1)%n] = nan // skipped
				if n > 1 {
					x[at] = 5
				}
				want := float32(5)
				if n == 1 {
					want = float32(math.Inf(-1)) // the only element is NaN
				}
				if got := impl.max(x); got != want {
					t.Fatalf("%s n=%d max at %d: got %g want %g", impl.name, n, at, got, want)
				}
			}
			x := make([]float32, n)
			for i := range x {
				x[i] = float32(i)
			}
			impl.scale(x, 0.5)
			for i, v := range x {
				if v != float32(i)*0.5 {
					t.Fatalf("%s n=%d scale: x[%d] got %g want %g", impl.name, n, i, v, float32(i)*0.5)
				}
			}
		}
	}
}

// FuzzElementwise checks every implementation at inputs the fuzzer picks,
// against package math with the bounds above: the strided sweep skips most
// mantissas, the fuzzer does not.
func FuzzElementwise(f *testing.F) {
	for _, x := range []float32{0, 1, -1, 0.625, 9.1, 88.72, -87.33, -104, 1e-40} {
		f.Add(math.Float32bits(x))
	}
	f.Fuzz(func(t *testing.T, bits uint32) {
		x := math.Float32frombits(bits)
		if x != x {
			return
		}
		xs := []float32{x}
		got := []float32{0}
		for _, impl := range vecImpls {
			impl.exp(got, xs)
			if want := math.Exp(float64(x)); want >= 0x1p-126 && want <= math.MaxFloat32 {
				if rel := math.Abs(float64(got[0])-want) / want; rel > expMaxRelErr {
					t.Errorf("%s exp(%g): got %g want %g (rel %g)", impl.name, x, got[0], want, rel)
				}
			}
			impl.sigmoid(got, xs)
			if want := 1 / (1 + math.Exp(-float64(x))); math.Abs(float64(got[0])-want) > actMaxAbsErr {
				t.Errorf("%s sigmoid(%g): got %g want %g", impl.name, x, got[0], want)
			}
			impl.tanh(got, xs)
			if want := math.Tanh(float64(x)); math.Abs(float64(got[0])-want) > actMaxAbsErr {
				t.Errorf("%s tanh(%g): got %g want %g", impl.name, x, got[0], want)
			}
		}
	})
}

// FuzzSoftmaxCrossEntropy compares the float32 path (vector kernels) with
// the float64 path (package math) on scores and shapes from the fuzz input.
func FuzzSoftmaxCrossEntropy(f *testing.F) {
	f.Add([]byte{1, 2, 3, 4, 5, 6, 7, 8}, uint8(3), uint8(0))
	f.Add([]byte{255, 0, 128, 64, 32, 16, 8, 4, 2, 1, 0, 0, 0, 0, 0, 0, 9}, uint8(17), uint8(16))
	f.Fuzz(func(t *testing.T, raw []byte, colsB, tgtB uint8) {
		cols := int(colsB)%40 + 1
		rows := len(raw) / cols
		if rows == 0 {
			return
		}
		logits := make([]float32, rows*cols)
		logits64 := make([]float64, rows*cols)
		for i := range logits {
			logits[i] = (float32(raw[i]) - 128) / 4 // scores in [-32, 32)
			logits64[i] = float64(logits[i])
		}
		targets := make([]int, rows)
		for r := range targets {
			targets[r] = (int(tgtB) + r) % (cols + 1)
			if targets[r] == cols {
				targets[r] = -1 // a skipped row
			}
		}
		grad := make([]float32, len(logits))
		grad64 := make([]float64, len(logits))
		loss := SoftmaxCrossEntropy(grad, logits, targets, rows, cols, 0.5)
		want := SoftmaxCrossEntropy(grad64, logits64, targets, rows, cols, 0.5)
		// Tolerance: float32 scores are exact in float64; exp32 adds 1.2e-7
		// relative per term, rounding to float32 another 6e-8, so the loss
		// is within about 1e-6 per row plus 1e-6 relative.
		if d := math.Abs(loss - want); d > 1e-6*float64(rows)+1e-6*math.Abs(want) {
			t.Errorf("loss: got %.9g want %.9g", loss, want)
		}
		for i := range grad {
			if d := math.Abs(float64(grad[i]) - grad64[i]); d > 1e-6 {
				t.Fatalf("grad[%d]: got %g want %g", i, grad[i], grad64[i])
			}
		}
	})
}
