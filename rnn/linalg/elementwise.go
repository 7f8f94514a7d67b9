package linalg

import "math"

// Sigmoid sets dst[i] = 1/(1+exp(-x[i])). dst and x may be the same slice.
func Sigmoid[T Float](dst, x []T) {
	for i, v := range x {
		dst[i] = T(1 / (1 + math.Exp(-float64(v))))
	}
}

// Tanh sets dst[i] = tanh(x[i]). dst and x may be the same slice.
func Tanh[T Float](dst, x []T) {
	for i, v := range x {
		dst[i] = T(math.Tanh(float64(v)))
	}
}

// Exp sets dst[i] = exp(x[i]). dst and x may be the same slice.
func Exp[T Float](dst, x []T) {
	for i, v := range x {
		dst[i] = T(math.Exp(float64(v)))
	}
}

// SoftmaxCrossEntropy treats logits as rows×cols scores, one row per
// position, and targets as the index of the correct column of each row. It
// writes to grad the gradient of the summed loss with respect to the logits,
// softmax(row) − onehot(target), scaled by scale, and returns the summed
// cross-entropy in nats,
//
//	L = −Σ_r log softmax(logits_r)[targets_r].
//
// A target below zero marks a row that is skipped: it adds no loss and gets a
// zero gradient. grad may alias logits.
func SoftmaxCrossEntropy[T Float](grad, logits []T, targets []int, rows, cols int, scale T) float64 {
	var total float64
	for r := 0; r < rows; r++ {
		row := logits[r*cols : (r+1)*cols]
		g := grad[r*cols : (r+1)*cols]
		t := targets[r]
		if t < 0 {
			for j := range g {
				g[j] = 0
			}
			continue
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
