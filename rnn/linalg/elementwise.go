package linalg

import (
	"math"
	"unsafe"
)

// Sigmoid sets dst[i] = 1/(1+exp(-x[i])). dst and x may be the same slice.
// float32 uses the polynomial kernel of exp32.go (absolute error at most
// 1e-7); float64 uses math.Exp.
func Sigmoid[T Float](dst, x []T) {
	dst = dst[:len(x)]
	if isF32[T]() {
		vec().sigmoid(as32(dst), as32(x))
		return
	}
	for i, v := range x {
		dst[i] = T(1 / (1 + math.Exp(-float64(v))))
	}
}

// Tanh sets dst[i] = tanh(x[i]). dst and x may be the same slice. float32
// uses the polynomial kernel of exp32.go (absolute error at most 1e-7);
// float64 uses math.Tanh.
func Tanh[T Float](dst, x []T) {
	dst = dst[:len(x)]
	if isF32[T]() {
		vec().tanh(as32(dst), as32(x))
		return
	}
	for i, v := range x {
		dst[i] = T(math.Tanh(float64(v)))
	}
}

// Exp sets dst[i] = exp(x[i]). dst and x may be the same slice. float32 uses
// the polynomial kernel of exp32.go (relative error at most 1.2e-7 where
// the result is a normal number); float64 uses math.Exp.
func Exp[T Float](dst, x []T) {
	dst = dst[:len(x)]
	if isF32[T]() {
		vec().exp(as32(dst), as32(x))
		return
	}
	for i, v := range x {
		dst[i] = T(math.Exp(float64(v)))
	}
}

// isF32 reports whether T's underlying type is float32.
func isF32[T Float]() bool {
	var z T
	return unsafe.Sizeof(z) == 4
}

// SoftmaxCrossEntropy treats logits as rows×cols scores, one row per
// position, and targets as the index of the correct column of each row. It
// writes to grad the gradient of the summed loss with respect to the logits,
// softmax(row) − onehot(target), scaled by scale, and returns the summed
// cross-entropy in nats,
//
//	L = −Σ_r log softmax(logits_r)[targets_r]
//	  = Σ_r (log Σ_j exp(logits_rj − max_r) + max_r − logits_r,target),
//
// shifting by the row maximum so that no exp overflows. A target below zero
// marks a row that is skipped: it adds no loss and gets a zero gradient.
// grad may alias logits. A NaN or +Inf score makes the row's loss and
// gradient NaN; a −Inf score gets probability zero when another score of its
// row is finite. For float32 the exponentials use exp32 and the row
// sums and the loss accumulate in float64.
func SoftmaxCrossEntropy[T Float](grad, logits []T, targets []int, rows, cols int, scale T) float64 {
	if rows*cols > len(logits) || rows*cols > len(grad) || rows > len(targets) {
		panic("linalg: SoftmaxCrossEntropy slices shorter than rows×cols")
	}
	if isF32[T]() {
		return softmaxCE32(as32(grad), as32(logits), targets, rows, cols, float32(scale))
	}
	var total float64
	for r := 0; r < rows; r++ {
		row := logits[r*cols : (r+1)*cols]
		g := grad[r*cols : (r+1)*cols]
		t := targets[r]
		if t < 0 {
			clear(g)
			continue
		}
		if t >= cols {
			panic("linalg: SoftmaxCrossEntropy target out of range")
		}
		mx := math.Inf(-1)
		for _, v := range row {
			mx = math.Max(mx, float64(v))
		}
		var sum float64
		for _, v := range row {
			sum += math.Exp(float64(v) - mx)
		}
		logZ := mx + math.Log(sum)
		total += logZ - float64(row[t])
		for j, v := range row {
			g[j] = T(math.Exp(float64(v)-logZ)) * scale
		}
		g[t] -= scale
	}
	return total
}

// softmaxCE32 is SoftmaxCrossEntropy for float32.
func softmaxCE32(grad, logits []float32, targets []int, rows, cols int, scale float32) float64 {
	var total float64
	for r := 0; r < rows; r++ {
		row := logits[r*cols : (r+1)*cols]
		g := grad[r*cols : (r+1)*cols : (r+1)*cols]
		t := targets[r]
		if t < 0 {
			clear(g)
			continue
		}
		if t >= cols {
			panic("linalg: SoftmaxCrossEntropy target out of range")
		}
		xt := row[t]
		v := vec()
		mx := v.max(row)
		sum := v.expShiftSum(g, row, mx)
		total += float64(mx) + math.Log(sum) - float64(xt)
		v.scale(g, scale/float32(sum))
		g[t] -= scale
	}
	return total
}
