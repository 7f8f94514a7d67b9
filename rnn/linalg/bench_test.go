package linalg

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// benchShapes are the products of the project's reference LSTM (H=256,
// 4H=1024, V=96, B=32, T·B=2048), with the transposes package rnn uses
// (weights stored out×in: forward products are ABᵀ), the same shapes
// untransposed, and a large square for the ceiling.
var benchShapes = []struct {
	op      string // NN, NT (ABᵀ) or TN (AᵀB)
	m, n, k int
}{
	{"NN", 32, 1024, 256},    // recurrent step, as in the reference workload
	{"NT", 32, 1024, 256},    // recurrent step as rnn calls it: h·W_hhᵀ
	{"NN", 2048, 1024, 256},  // input projection of a window
	{"NT", 2048, 1024, 256},  // same, as rnn calls it
	{"NN", 2048, 96, 256},    // output layer
	{"NT", 2048, 96, 256},    // same, as rnn calls it
	{"NN", 1024, 1024, 1024}, // square
	{"NN", 32, 256, 1024},    // backward recurrent step: dG·W_hh
	{"TN", 1024, 256, 2048},  // recurrent weight gradient: dGᵀ·H
	{"TN", 96, 256, 2048},    // output weight gradient: dYᵀ·H
	{"NN", 2048, 256, 96},    // backward through the output layer: dY·W_out
}

// gemmFunc is one float32 product under benchmark.
type benchKernel struct {
	name string
	run  func(p *Pool, tA, tB bool, m, n, k int, a []float32, lda int, b []float32, ldb int, c []float32, ldc int)
}

func benchKernels() []benchKernel {
	var ks []benchKernel
	for _, kern := range kernels32 {
		ks = append(ks, benchKernel{kern.name, func(p *Pool, tA, tB bool, m, n, k int, a []float32, lda int, b []float32, ldb int, c []float32, ldc int) {
			gemmRun(p, kern, tA, tB, m, n, k, 1, a, lda, b, ldb, 0, c, ldc)
		}})
	}
	return append(ks, extraBenchKernels()...)
}

var sinkF32 float32

func BenchmarkSgemm(b *testing.B) {
	pools := map[int]*Pool{1: nil, 2: NewPool(2)}
	defer pools[2].Close()
	for _, s := range benchShapes {
		tA, tB := s.op[0] == 'T', s.op[1] == 'T'
		rng := rand.New(rand.NewPCG(1, 1))
		fill := func(n int) []float32 {
			x := make([]float32, n)
			for i := range x {
				x[i] = float32(rng.Float64()*2 - 1)
			}
			return x
		}
		a, bm, c := fill(s.m*s.k), fill(s.k*s.n), fill(s.m*s.n)
		lda, ldb := s.k, s.n
		if tA {
			lda = s.m
		}
		if tB {
			ldb = s.k
		}
		for _, kern := range benchKernels() {
			for _, threads := range []int{1, 2} {
				name := fmt.Sprintf("shape=%dx%dx%d/op=%s/kernel=%s/threads=%d", s.m, s.n, s.k, s.op, kern.name, threads)
				b.Run(name, func(b *testing.B) {
					p := pools[threads]
					b.ReportAllocs()
					kern.run(p, tA, tB, s.m, s.n, s.k, a, lda, bm, ldb, c, s.n)
					b.ResetTimer()
					for i := 0; i < b.N; i++ {
						kern.run(p, tA, tB, s.m, s.n, s.k, a, lda, bm, ldb, c, s.n)
					}
					b.ReportMetric(2*float64(s.m)*float64(s.n)*float64(s.k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
					sinkF32 = c[0]
				})
			}
		}
	}
}

var sinkF64 float64

// BenchmarkElementwise compares the float32 kernels with the loop over
// package math they replace, per element (ns/op is per slice of n).
func BenchmarkElementwise(b *testing.B) {
	const n = 4096
	rng := rand.New(rand.NewPCG(2, 2))
	x := make([]float32, n)
	for i := range x {
		x[i] = float32(rng.NormFloat64() * 3)
	}
	dst := make([]float32, n)
	mathLoop := func(f func(float64) float64) func(dst, x []float32) {
		return func(dst, x []float32) {
			for i, v := range x {
				dst[i] = float32(f(float64(v)))
			}
		}
	}
	sigmoid64 := func(v float64) float64 { return 1 / (1 + math.Exp(-v)) }
	type benchCase struct {
		fn, impl string
		f        func(dst, x []float32)
	}
	var cases []benchCase
	for _, impl := range vecImpls {
		cases = append(cases, benchCase{"exp", impl.name, impl.exp}, benchCase{"sigmoid", impl.name, impl.sigmoid}, benchCase{"tanh", impl.name, impl.tanh})
	}
	cases = append(cases, benchCase{"exp", "math", mathLoop(math.Exp)}, benchCase{"sigmoid", "math", mathLoop(sigmoid64)}, benchCase{"tanh", "math", mathLoop(math.Tanh)})
	for _, tc := range cases {
		b.Run(fmt.Sprintf("fn=%s/impl=%s/n=%d", tc.fn, tc.impl, n), func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				tc.f(dst, x)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/n, "ns/element")
			sinkF32 = dst[0]
		})
	}
	// Softmax cross-entropy over the output layer of the reference model:
	// 32 rows of V=96, and a large vocabulary, V=10000.
	for _, v := range []int{96, 10000} {
		const rows = 32
		logits := make([]float32, rows*v)
		for i := range logits {
			logits[i] = float32(rng.NormFloat64() * 2)
		}
		targets := make([]int, rows)
		for i := range targets {
			targets[i] = rng.IntN(v)
		}
		grad := make([]float32, len(logits))
		logits64 := make([]float64, len(logits))
		grad64 := make([]float64, len(logits))
		for i, l := range logits {
			logits64[i] = float64(l)
		}
		b.Run(fmt.Sprintf("fn=softmaxce/impl=%s/n=%dx%d", vec().name, rows, v), func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				sinkF64 = SoftmaxCrossEntropy(grad, logits, targets, rows, v, 1)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(rows*v), "ns/element")
		})
		b.Run(fmt.Sprintf("fn=softmaxce/impl=math/n=%dx%d", rows, v), func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				sinkF64 = SoftmaxCrossEntropy(grad64, logits64, targets, rows, v, 1)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(rows*v), "ns/element")
		})
	}
}

// BenchmarkSgemmPacked is the recurrent step with the weights packed once
// (PackB outside the loop), beside BenchmarkSgemm's unpacked figure.
func BenchmarkSgemmPacked(b *testing.B) {
	pools := map[int]*Pool{1: nil, 2: NewPool(2)}
	defer pools[2].Close()
	for _, s := range [][3]int{{32, 1024, 256}, {32, 256, 1024}} {
		m, n, k := s[0], s[1], s[2]
		rng := rand.New(rand.NewPCG(1, 1))
		a, bm, c := make([]float32, m*k), make([]float32, k*n), make([]float32, m*n)
		for i := range a {
			a[i] = float32(rng.Float64())
		}
		for i := range bm {
			bm[i] = float32(rng.Float64())
		}
		var pb PackedB
		PackB(&pb, false, k, n, bm, n)
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("shape=%dx%dx%d/kernel=%s/threads=%d", m, n, k, kernel32().name, threads), func(b *testing.B) {
				p := pools[threads]
				b.ReportAllocs()
				for i := 0; i < b.N; i++ {
					GemmPacked(p, false, m, 1, a, k, &pb, 0, c, n)
				}
				b.ReportMetric(2*float64(m*n*k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
				sinkF32 = c[0]
			})
		}
	}
}

// BenchmarkMicroKernel runs one micro-kernel on packed panels that stay in
// L1 (KC=256): the ceiling the blocked product can approach.
func BenchmarkMicroKernel(b *testing.B) {
	for _, kern := range kernels32 {
		b.Run("kernel="+kern.name, func(b *testing.B) {
			const kc = 256
			ap := make([]float32, kern.mr*kc)
			bp := make([]float32, kern.nr*kc)
			c := make([]float32, kern.mr*kern.nr)
			for i := range ap {
				ap[i] = 1e-3
			}
			for i := range bp {
				bp[i] = 1e-3
			}
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				kern.micro(kc, ap, bp, c, kern.nr, 1, 1)
			}
			b.ReportMetric(2*float64(kern.mr*kern.nr*kc)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
			sinkF32 = c[0]
		})
	}
}
