package rnn

import (
	_ "embed"
	"encoding/json"
	"fmt"
	"math"
	"testing"
)

// torchFloat32Reference is testdata/torch_float32_reference.json, written
// by testdata/torch_reference.py (Debian python3-torch): a realistic
// network, 2 layers of 256 units over a whole training window of 35 steps
// and 4 streams, computed by PyTorch in float64 (the reference values) and
// in float32 (its own deviation, for calibration).
//
//go:embed testdata/torch_float32_reference.json
var torchFloat32Reference []byte

// Tolerances of weft's float32 path against PyTorch's float64 values,
// derived from how float32 rounding errors grow, not fitted to the
// measurement. With unit roundoff u = 2^-24, an inner product of length K
// has a rounding error of at most about K·u relative to Σ|x_i·y_i|
// (Higham 2002, "Accuracy and Stability of Numerical Algorithms", §3.1)
// and, for rounding errors that behave as independent, about √K·u (Higham
// & Mary 2019, "A new approach to probabilistic rounding error analysis",
// SIAM J. Sci. Comput. 41). Here K ≤ E + H = 320. The forward pass chains
// T + L = 37 such steps, and errors carried through a contracting
// recurrence add up at most linearly along the chain; the backward pass
// runs the chain once more. The float32 exp and tanh kernels add about 2u
// per activation, small next to √K·u ≈ 18u. So:
//
//	forward quantities (loss, final states): √320 · u · 37 ≈ 3.9e-5
//	gradients:                           2 · √320 · u · 37 ≈ 7.9e-5
//
// relative, in the Euclidean norm. PyTorch's own float32 run stays within
// these bounds (its errors are in the JSON: at most 3.4e-7 forward and
// 2.8e-6 on gradients when the file was made); weft's float32 path was
// measured at most 1.0e-6 (the logs print every figure).
const (
	torch32FwdTol  = 3.9e-5
	torch32GradTol = 7.9e-5
)

type torch32Tensor struct {
	Size     int       `json:"size"`
	Norm     float64   `json:"norm"`
	Indices  []int     `json:"indices"`
	Values   []float64 `json:"values"`
	TorchErr float64   `json:"torch_float32_rel_err"`
}

type torch32Case struct {
	Loss       float64                  `json:"loss"`
	TorchLoss  float64                  `json:"torch_float32_loss_rel_err"`
	FinalH     []float64                `json:"final_h"`
	TorchFinal float64                  `json:"torch_float32_final_h_rel_err"`
	Tensors    map[string]torch32Tensor `json:"tensors"`
}

type torch32File struct {
	torchSetup
	Cases map[string]torch32Case `json:"cases"`
}

// torchDet is torch_reference.py's det() times scale: W[r, c] =
// scale·0.1·sin(1 + r + 0.5c + k) for a matrix, scale·0.1·sin(1 + r + k)
// for a vector (cols 0), in float64.
func torchDet(rows, cols, k int, scale float64) []float64 {
	out := make([]float64, 0, rows*max(cols, 1))
	for r := range rows {
		if cols == 0 {
			out = append(out, 0.1*math.Sin(1+float64(r)+float64(k))*scale)
			continue
		}
		for c := range cols {
			out = append(out, 0.1*math.Sin(1+float64(r)+0.5*float64(c)+float64(k))*scale)
		}
	}
	return out
}

func to32(x []float64) []float32 {
	out := make([]float32, len(x))
	for i, v := range x {
		out[i] = float32(v)
	}
	return out
}

// normRelErr is ‖got − want‖ / ‖want‖ in the Euclidean norm.
func normRelErr(got []float64, want []float64) float64 {
	var d, n float64
	for i := range want {
		d += (got[i] - want[i]) * (got[i] - want[i])
		n += want[i] * want[i]
	}
	return math.Sqrt(d / n)
}

// TestFloat32WindowAgainstPyTorch runs weft's float32 path (the one
// training uses: float32 buffers, the SIMD GEMM, the float32 exp and tanh)
// over one whole training window of a 2×256 LSTM and GRU with PyTorch's
// weights, and compares the loss, the final hidden states and the
// gradients with PyTorch's float64 values.
func TestFloat32WindowAgainstPyTorch(t *testing.T) {
	var ref torch32File
	if err := json.Unmarshal(torchFloat32Reference, &ref); err != nil {
		t.Fatal(err)
	}
	for _, kind := range []string{"lstm", "gru"} {
		t.Run(kind, func(t *testing.T) {
			rc, ok := ref.Cases[kind]
			if !ok {
				t.Fatalf("case %s missing", kind)
			}
			cfg := DefaultConfig()
			cfg.Cell = kind
			if kind == "gru" {
				cfg.GRUForm = "reset_after" // torch.nn.GRU's form
			}
			cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = ref.Layers, ref.H, ref.E
			m, err := NewModel[float32](cfg, ref.V, 1)
			if err != nil {
				t.Fatal(err)
			}
			// The weights of the script: det() with k counting PyTorch's
			// tensors in order (embedding; per layer weight_ih, weight_hh,
			// bias_ih, bias_hh; output weight and bias), times the script's
			// scale32 (3 for the layers, 5 for the output weight), each
			// rounded once to float32; the two biases summed in float32, as
			// PyTorch's float32 run adds them.
			H, G := ref.H, 4*ref.H
			if kind == "gru" {
				G = 3 * ref.H
			}
			want := map[string][]float32{
				"embedding.weight": to32(torchDet(ref.V, ref.E, 0, 1)),
				"output.weight":    to32(torchDet(ref.V, H, 1+4*ref.Layers, 5)),
				"output.bias":      to32(torchDet(ref.V, 0, 2+4*ref.Layers, 1)),
			}
			for l := range ref.Layers {
				in := ref.E
				if l > 0 {
					in = H
				}
				bi, bh := to32(torchDet(G, 0, 3+4*l, 3)), to32(torchDet(G, 0, 4+4*l, 3))
				want[fmt.Sprintf("layer.%d.input_weight", l)] = to32(torchDet(G, in, 1+4*l, 3))
				want[fmt.Sprintf("layer.%d.recurrent_weight", l)] = to32(torchDet(G, H, 2+4*l, 3))
				bias := make([]float32, G)
				for i := range bias {
					bias[i] = bi[i] + bh[i]
				}
				if kind == "gru" {
					copy(bias[2*H:], bi[2*H:]) // b_in alone; b_hn is the recurrent bias
					want[fmt.Sprintf("layer.%d.recurrent_bias", l)] = bh[2*H:]
				}
				want[fmt.Sprintf("layer.%d.bias", l)] = bias
			}
			if len(m.Params()) != len(want) || len(rc.Tensors) != len(want) {
				t.Fatalf("model has %d tensors, the script %d, the test sets %d", len(m.Params()), len(rc.Tensors), len(want))
			}
			for _, p := range m.Params() {
				w, ok := want[p.Name]
				if !ok || len(w) != len(p.Value) {
					t.Fatalf("%s: no weights of %d values", p.Name, len(p.Value))
				}
				copy(p.Value, w)
			}
			B, T := ref.B, ref.T
			w := newWork(m, B, T, true)
			for l := range w.layers {
				copy(w.layers[l].h[:B*H], to32(torchDet(B, H, 50+l, 1)))
				if w.layers[l].c != nil {
					copy(w.layers[l].c[:B*H], to32(torchDet(B, H, 60+l, 1)))
				}
			}
			m.ZeroGrad()
			w.forward(nil, ref.Inputs, T, false)
			var finalH []float64
			for l := range w.layers {
				for _, v := range w.layers[l].h[T*B*H : (T+1)*B*H] {
					finalH = append(finalH, float64(v))
				}
			}
			total, n := w.loss(ref.Targets)
			w.backward(nil)

			check := func(what string, got, torchErr, tol float64) {
				t.Helper()
				t.Logf("%-28s weft float32 %.3g, PyTorch float32 %.3g (bound %.2g)", what, got, torchErr, tol)
				if !(got <= tol) {
					t.Errorf("%s: relative error %.3g from PyTorch float64, want <= %.2g", what, got, tol)
				}
				if !(torchErr <= tol) {
					t.Errorf("%s: PyTorch's own float32 error %.3g exceeds the derived bound %.2g", what, torchErr, tol)
				}
			}
			check("loss", math.Abs(total/float64(n)-rc.Loss)/math.Abs(rc.Loss), rc.TorchLoss, torch32FwdTol)
			check("final hidden states", normRelErr(finalH, rc.FinalH), rc.TorchFinal, torch32FwdTol)
			for _, p := range m.Params() {
				rt := rc.Tensors[p.Name]
				var norm float64
				for _, g := range p.Grad {
					norm += float64(g) * float64(g)
				}
				norm = math.Sqrt(norm)
				check(p.Name+" grad norm", math.Abs(norm-rt.Norm)/rt.Norm, rt.TorchErr, torch32GradTol)
				// A norm-wise relative error e bounds every entry's error by
				// e·‖g‖.
				for j, i := range rt.Indices {
					if d := math.Abs(float64(p.Grad[i]) - rt.Values[j]); d > torch32GradTol*rt.Norm {
						t.Errorf("%s grad[%d]: got %.8g, want %.8g (|diff| %.3g > %.2g·‖g‖)", p.Name, i, p.Grad[i], rt.Values[j], d, torch32GradTol)
						break
					}
				}
			}
		})
	}
}
