package linalg

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// benchShapes are the products of the reference LSTM of ENGINE.md (H=256,
// 4H=1024, V=96, B=32, T·B=2048) in the forward pass, the transposed
// products of its backward pass, and a large square for the ceiling.
var benchShapes = []struct {
	op      string // NN, TN (AᵀB) or NT (ABᵀ)
	m, n, k int
}{
	{"NN", 32, 1024, 256},    // recurrent step: h·W_hh
	{"NN", 2048, 1024, 256},  // input projection of a window
	{"NN", 2048, 96, 256},    // output layer
	{"NN", 1024, 1024, 1024}, // square
	{"NT", 32, 256, 1024},    // backward recurrent step: dG·W_hhᵀ
	{"NT", 2048, 256, 1024},  // backward input: dG·Wᵀ
	{"TN", 256, 1024, 2048},  // weight gradient: Hᵀ·dG
	{"TN", 256, 96, 2048},    // output weight gradient: Hᵀ·dY
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
