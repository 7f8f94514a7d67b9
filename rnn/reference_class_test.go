package rnn

import (
	_ "embed"
	"encoding/json"
	"math"
	"testing"
)

// torchClassReference holds the class-based output layer's log-probabilities,
// loss and gradients computed by PyTorch autograd
// (testdata/torch_class_reference.py, Debian python3-torch, float64) for a
// tiny LSTM with deterministic weights.
//
//go:embed testdata/torch_class_reference.json
var torchClassReference []byte

func TestClassAgainstPyTorch(t *testing.T) {
	var ref struct {
		Source   string                 `json:"source"`
		V        int                    `json:"V"`
		E        int                    `json:"E"`
		H        int                    `json:"H"`
		C        int                    `json:"C"`
		T        int                    `json:"T"`
		B        int                    `json:"B"`
		Starts   []int                  `json:"starts"`
		Inputs   []int                  `json:"inputs"`
		Targets  []int                  `json:"targets"`
		H0       []float64              `json:"h0"`
		C0       []float64              `json:"c0"`
		Loss     float64                `json:"loss"`
		LogProbs []float64              `json:"logprobs"`
		Tensors  map[string]torchTensor `json:"tensors"`
	}
	if err := json.Unmarshal(torchClassReference, &ref); err != nil {
		t.Fatal(err)
	}
	cfg := DefaultConfig()
	cfg.Cell, cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = "lstm", 1, ref.H, ref.E
	cfg.OutputLayer, cfg.OutputClasses = "class", ref.C
	m, err := NewModel[float64](cfg, ref.V, 1) // no counts: ids of equal weight
	if err != nil {
		t.Fatal(err)
	}
	if got := m.OutputClasses(); len(got) != len(ref.Starts) {
		t.Fatalf("classes %v, reference %v", got, ref.Starts)
	} else {
		for i := range got {
			if got[i] != ref.Starts[i] {
				t.Fatalf("classes %v, reference %v", got, ref.Starts)
			}
		}
	}
	if len(m.Params()) != len(ref.Tensors) {
		t.Fatalf("model has %d tensors, reference %d", len(m.Params()), len(ref.Tensors))
	}
	for _, p := range m.Params() {
		rt, ok := ref.Tensors[p.Name]
		if !ok || len(rt.Value) != len(p.Value) {
			t.Fatalf("tensor %s: missing from the reference or of another size", p.Name)
		}
		copy(p.Value, rt.Value)
	}
	B, T, H, V := ref.B, ref.T, ref.H, ref.V
	w := newWork(m, B, T, true)
	w.logits, w.full = make([]float64, B*T*V), true // the whole distribution too
	copy(w.layers[0].h[:B*H], ref.H0)
	copy(w.layers[0].c[:B*H], ref.C0)
	worst := 0.0
	check := func(what string, got, want []float64) {
		t.Helper()
		for i := range want {
			worst = max(worst, math.Abs(got[i]-want[i]))
			if !closeTo(got[i], want[i], torchTol) {
				t.Errorf("%s[%d]: got %.15g, want %.15g (PyTorch)", what, i, got[i], want[i])
				return
			}
		}
	}
	m.ZeroGrad()
	w.forward(nil, ref.Inputs, T, false)
	check("ln P", w.logits, ref.LogProbs)
	lp := make([]float64, B*T)
	w.classLogProbs(nil, lp, ref.Targets, B*T)
	for r, tg := range ref.Targets {
		if tg >= 0 {
			check("ln P(target)", lp[r:r+1], ref.LogProbs[r*V+tg:r*V+tg+1])
		}
	}
	total, n := w.loss(ref.Targets)
	check("loss", []float64{total / float64(n)}, []float64{ref.Loss})
	w.backward(nil)
	for _, p := range m.Params() {
		check(p.Name+" grad", p.Grad, ref.Tensors[p.Name].Grad)
	}
	t.Logf("largest absolute difference from PyTorch (%s): %.3g", ref.Source, worst)
}
