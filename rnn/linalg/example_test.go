package linalg_test

import (
	"fmt"
	"math"

	"weft/rnn/linalg"
)

// A 2×3 matrix times the transpose of a 2×3 matrix, on a pool of two
// threads (this product is small, so it runs on the caller).
func ExampleGemm() {
	pool := linalg.NewPool(2)
	defer pool.Close()
	a := []float32{
		1, 2, 3,
		4, 5, 6,
	}
	b := []float32{ // used as Bᵀ: B is 3×2
		1, 0, 1,
		0, 1, 1,
	}
	c := make([]float32, 4)
	linalg.Gemm(pool, false, true, 2, 2, 3, 1, a, 3, b, 3, 0, c, 2)
	fmt.Println(c)
	// Output: [4 5 10 11]
}

// Equal scores over four classes: the loss is ln 4 nats per row and the
// gradient is 1/4 − onehot(target).
func ExampleSoftmaxCrossEntropy() {
	logits := []float32{2, 2, 2, 2}
	grad := make([]float32, 4)
	loss := linalg.SoftmaxCrossEntropy(grad, logits, []int{1}, 1, 4, 1)
	fmt.Printf("loss %.6f nats (ln 4 = %.6f)\n", loss, math.Log(4))
	fmt.Println(grad)
	// Output:
	// loss 1.386294 nats (ln 4 = 1.386294)
	// [0.25 -0.75 0.25 0.25]
}

// The recurrent weights are packed once and reused at every time step.
func ExampleGemmPacked() {
	w := []float32{ // 2×2 weights, stored out×in and used as Wᵀ
		1, 2,
		3, 4,
	}
	var packed linalg.PackedB
	linalg.PackB(&packed, true, 2, 2, w, 2)
	h := []float32{1, 1}
	out := make([]float32, 2)
	for step := 0; step < 2; step++ {
		linalg.GemmPacked(nil, false, 1, 1, h, 2, &packed, 0, out, 2)
		fmt.Println(out)
		copy(h, out)
	}
	// Output:
	// [3 7]
	// [17 37]
}

// squares is a loop body for Pool.For: each index is computed from itself
// alone, so the result is the same on any number of threads.
type squares struct{ dst []float32 }

func (s *squares) Range(lo, hi int) {
	for i := lo; i < hi; i++ {
		s.dst[i] = float32(i * i)
	}
}

// An elementwise loop split over two threads in chunks of 4 indices.
func ExamplePool_For() {
	p := linalg.NewPool(2)
	defer p.Close()
	body := &squares{dst: make([]float32, 10)}
	p.For(len(body.dst), 4, body)
	fmt.Println(body.dst)
	// Output:
	// [0 1 4 9 16 25 36 49 64 81]
}
