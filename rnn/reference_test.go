package rnn

import (
	_ "embed"
	"encoding/json"
	"math"
	"testing"
)

// torchReference holds forward values and gradients computed by PyTorch
// (testdata/torch_reference.py, Debian python3-torch, float64) for tiny
// 2-layer networks with deterministic weights.
//
//go:embed testdata/torch_reference.json
var torchReference []byte

// torchTol is the agreement the issue asks of vanilla, LSTM and the
// reset-after GRU against PyTorch in float64.
const torchTol = 1e-9

type torchTensor struct {
	Shape []int     `json:"shape"`
	Value []float64 `json:"value"`
	Grad  []float64 `json:"grad"`
}

type torchCase struct {
	Loss    float64                `json:"loss"`
	Logits  []float64              `json:"logits"`
	H0      []float64              `json:"h0"`
	C0      []float64              `json:"c0"`
	FinalH  []float64              `json:"final_h"`
	FinalC  []float64              `json:"final_c"`
	Tensors map[string]torchTensor `json:"tensors"`
}

// torchSetup is the network shape and the data of a PyTorch reference
// file.
type torchSetup struct {
	Source  string `json:"source"`
	V       int    `json:"V"`
	E       int    `json:"E"`
	H       int    `json:"H"`
	Layers  int    `json:"layers"`
	T       int    `json:"T"`
	B       int    `json:"B"`
	Inputs  []int  `json:"inputs"`
	Targets []int  `json:"targets"`
}

type torchFile struct {
	torchSetup
	Cases map[string]torchCase `json:"cases"`
}

func TestAgainstPyTorch(t *testing.T) {
	var ref torchFile
	if err := json.Unmarshal(torchReference, &ref); err != nil {
		t.Fatal(err)
	}
	configs := map[string]func(*Config){
		"rnn-tanh":        func(c *Config) { c.Cell, c.Activation = "rnn", "tanh" },
		"rnn-relu":        func(c *Config) { c.Cell, c.Activation = "rnn", "relu" },
		"lstm":            func(c *Config) { c.Cell = "lstm" },
		"gru-reset-after": func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_after" },
		// No torch.nn module: the script writes this form out in torch ops.
		"gru-reset-before": func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_before" },
	}
	if len(ref.Cases) != len(configs) {
		t.Fatalf("reference has %d cases, test knows %d", len(ref.Cases), len(configs))
	}
	worst := 0.0
	for name, set := range configs {
		t.Run(name, func(t *testing.T) {
			rc, ok := ref.Cases[name]
			if !ok {
				t.Fatalf("case %s missing from testdata/torch_reference.json", name)
			}
			cfg := DefaultConfig()
			set(&cfg)
			cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = ref.Layers, ref.H, ref.E
			m, err := NewModel[float64](cfg, ref.V, 1)
			if err != nil {
				t.Fatal(err)
			}
			if len(m.Params()) != len(rc.Tensors) {
				t.Fatalf("model has %d tensors, reference %d", len(m.Params()), len(rc.Tensors))
			}
			for _, p := range m.Params() {
				rt, ok := rc.Tensors[p.Name]
				if !ok {
					t.Fatalf("tensor %s missing from the reference", p.Name)
				}
				if len(rt.Value) != len(p.Value) {
					t.Fatalf("%s: reference has %d values, model %d", p.Name, len(rt.Value), len(p.Value))
				}
				copy(p.Value, rt.Value)
			}
			B, T, H := ref.B, ref.T, ref.H
			w := newWork(m, B, T, true)
			for l := range w.layers {
				copy(w.layers[l].h[:B*H], rc.H0[l*B*H:(l+1)*B*H])
				if w.layers[l].c != nil {
					copy(w.layers[l].c[:B*H], rc.C0[l*B*H:(l+1)*B*H])
				}
			}
			m.ZeroGrad()
			w.forward(nil, ref.Inputs, T, false)
			check := func(what string, got, want []float64) {
				t.Helper()
				for i := range want {
					d := math.Abs(got[i] - want[i])
					worst = max(worst, d)
					if !closeTo(got[i], want[i], torchTol) {
						t.Errorf("%s[%d]: got %.15g, want %.15g (PyTorch)", what, i, got[i], want[i])
						return
					}
				}
			}
			check("logits", w.logits[:T*B*ref.V], rc.Logits)
			var finalH, finalC []float64
			for l := range w.layers {
				finalH = append(finalH, w.layers[l].h[T*B*H:(T+1)*B*H]...)
				if w.layers[l].c != nil {
					finalC = append(finalC, w.layers[l].c[T*B*H:(T+1)*B*H]...)
				}
			}
			check("final h", finalH, rc.FinalH)
			if rc.FinalC != nil {
				check("final c", finalC, rc.FinalC)
			}
			total, n := w.loss(ref.Targets)
			check("loss", []float64{total / float64(n)}, []float64{rc.Loss})
			w.backward(nil)
			for _, p := range m.Params() {
				check(p.Name+" grad", p.Grad, rc.Tensors[p.Name].Grad)
			}
		})
	}
	t.Logf("largest absolute difference from PyTorch (%s): %.3g", ref.Source, worst)
}
