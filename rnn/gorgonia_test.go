package rnn

import (
	"fmt"
	"testing"

	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// gorgoniaTol is the agreement between weft's hand-written BPTT and
// gorgonia's symbolic gradients of the same graph in float64: both compute
// the same sums in different orders, so they agree to rounding (about
// 3e-16 on a tiny LSTM when the engine was designed).
const gorgoniaTol = 1e-12

// gorgoniaGraph builds the model's window as a gorgonia expression graph:
// the same embedding, cells, projection, output layer and mean
// cross-entropy, unrolled over T steps from the carried state h0 (c0), with
// every weight passed in as an explicit value (gorgonia's initialisers draw
// from the global generator, which would tie the values to test order).
func gorgoniaGraph(t *testing.T, m *Model[float64], h0, c0 [][]float64, inputs, targets []int, B, T int) (float64, map[string][]float64) {
	t.Helper()
	g := G.NewGraph()
	cfg := m.Config()
	V, H := m.VocabSize(), cfg.HiddenSize
	must := func(n *G.Node, err error) *G.Node {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
		return n
	}
	matrix := func(name string, rows, cols int, vals []float64) *G.Node {
		return G.NewMatrix(g, tensor.Float64, G.WithShape(rows, cols), G.WithName(name),
			G.WithValue(tensor.New(tensor.WithShape(rows, cols), tensor.WithBacking(append([]float64(nil), vals...)))))
	}
	nodes := map[string]*G.Node{}
	var wrt []*G.Node
	for _, p := range m.Params() {
		r, c := 1, p.Shape[0]
		if len(p.Shape) == 2 {
			r, c = p.Shape[0], p.Shape[1]
		}
		n := matrix(p.Name, r, c, p.Value)
		nodes[p.Name] = n
		wrt = append(wrt, n)
	}
	outW := nodes["output.weight"]
	if cfg.TieEmbeddings {
		outW = nodes["embedding.weight"]
	}
	onehot := func(name string, ids []int) *G.Node {
		v := make([]float64, len(ids)*V)
		for i, id := range ids {
			if id >= 0 {
				v[i*V+id] = 1
			}
		}
		return matrix(name, len(ids), V, v)
	}
	lin := func(x, w *G.Node) *G.Node { return must(G.Mul(x, must(G.Transpose(w)))) } // x wᵀ
	addBias := func(x, b *G.Node) *G.Node { return must(G.BroadcastAdd(x, b, nil, []byte{0})) }
	cols := func(x *G.Node, k int) *G.Node { return must(G.Slice(x, nil, G.S(k*H, (k+1)*H))) }
	add, mul := func(a, b *G.Node) *G.Node { return must(G.Add(a, b)) }, func(a, b *G.Node) *G.Node { return must(G.HadamardProd(a, b)) }
	sig, tanh := func(a *G.Node) *G.Node { return must(G.Sigmoid(a)) }, func(a *G.Node) *G.Node { return must(G.Tanh(a)) }

	L := cfg.Layers
	hs, cs := make([]*G.Node, L), make([]*G.Node, L)
	for l := 0; l < L; l++ {
		hs[l] = matrix(fmt.Sprintf("h0.%d", l), B, H, h0[l])
		if c0 != nil {
			cs[l] = matrix(fmt.Sprintf("c0.%d", l), B, H, c0[l])
		}
	}
	var total *G.Node
	count := 0
	for s := 0; s < T; s++ {
		x := onehot(fmt.Sprintf("x.%d", s), inputs[s*B:(s+1)*B])
		if cfg.EmbeddingSize > 0 {
			x = must(G.Mul(x, nodes["embedding.weight"]))
		}
		for l := 0; l < L; l++ {
			p := fmt.Sprintf("layer.%d.", l)
			win, wrec, bias := nodes[p+"input_weight"], nodes[p+"recurrent_weight"], nodes[p+"bias"]
			xg := addBias(lin(x, win), bias)
			hp := hs[l]
			switch {
			case cfg.Cell == "rnn":
				pre := add(xg, lin(hp, wrec))
				if cfg.Activation == "relu" {
					hs[l] = must(G.Rectify(pre))
				} else {
					hs[l] = tanh(pre)
				}
			case cfg.Cell == "lstm":
				a := add(xg, lin(hp, wrec))
				i, f, gg, o := sig(cols(a, 0)), sig(cols(a, 1)), tanh(cols(a, 2)), sig(cols(a, 3))
				cs[l] = add(mul(f, cs[l]), mul(i, gg))
				hs[l] = mul(o, tanh(cs[l]))
			case cfg.GRUForm == "reset_after":
				rec := lin(hp, wrec)
				r := sig(add(cols(xg, 0), cols(rec, 0)))
				z := sig(add(cols(xg, 1), cols(rec, 1)))
				hn := addBias(cols(rec, 2), nodes[p+"recurrent_bias"])
				n := tanh(add(cols(xg, 2), mul(r, hn)))
				hs[l] = add(n, mul(z, must(G.Sub(hp, n)))) // (1−z)n + z h
			default: // reset_before
				urz := must(G.Slice(wrec, G.S(0, 2*H), nil))
				un := must(G.Slice(wrec, G.S(2*H, 3*H), nil))
				rz := lin(hp, urz)
				r := sig(add(cols(xg, 0), cols(rz, 0)))
				z := sig(add(cols(xg, 1), cols(rz, 1)))
				n := tanh(add(cols(xg, 2), lin(mul(r, hp), un)))
				hs[l] = add(n, mul(z, must(G.Sub(hp, n))))
			}
			x = hs[l]
		}
		if cfg.ProjectionSize > 0 {
			x = lin(x, nodes["projection.weight"])
		}
		logits := addBias(lin(x, outW), nodes["output.bias"])
		tg := targets[s*B : (s+1)*B]
		mask := make([]float64, B)
		for b, id := range tg {
			if id >= 0 {
				mask[b] = 1
				count++
			}
		}
		maskN := G.NewVector(g, tensor.Float64, G.WithShape(B), G.WithName(fmt.Sprintf("mask.%d", s)),
			G.WithValue(tensor.New(tensor.WithShape(B), tensor.WithBacking(mask))))
		// Σ_b mask_b ln Σ_j exp(logit_bj) − Σ_b logit_b,target_b
		lse := must(G.Log(must(G.Sum(must(G.Exp(logits)), 1))))
		term := must(G.Sub(must(G.Sum(mul(lse, maskN))), must(G.Sum(mul(logits, onehot(fmt.Sprintf("y.%d", s), tg))))))
		if total == nil {
			total = term
		} else {
			total = add(total, term)
		}
	}
	cost := must(G.Mul(total, G.NewConstant(1/float64(count))))
	grads, err := G.Grad(cost, wrt...)
	if err != nil {
		t.Fatal(err)
	}
	vm := G.NewTapeMachine(g)
	defer vm.Close()
	if err := vm.RunAll(); err != nil {
		t.Fatal(err)
	}
	out := map[string][]float64{}
	for i, p := range m.Params() {
		out[p.Name] = append([]float64(nil), grads[i].Value().Data().([]float64)...)
	}
	return cost.Value().Data().(float64), out
}

func TestAgainstGorgonia(t *testing.T) {
	type variant struct {
		name string
		set  func(*Config)
	}
	cells := []variant{
		{"rnn-tanh", func(c *Config) { c.Cell, c.Activation = "rnn", "tanh" }},
		{"rnn-relu", func(c *Config) { c.Cell, c.Activation = "rnn", "relu" }},
		{"gru-reset-after", func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_after" }},
		{"gru-reset-before", func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_before" }},
		{"lstm", func(c *Config) { c.Cell = "lstm" }},
	}
	shapes := []variant{
		{"layers=1", func(c *Config) {}},
		{"layers=2/tied", func(c *Config) { c.Layers, c.TieEmbeddings, c.ProjectionSize = 2, true, 3 }},
		{"one-hot", func(c *Config) { c.EmbeddingSize = 0 }},
	}
	worst := 0.0
	for _, cv := range cells {
		for _, sv := range shapes {
			t.Run(cv.name+"/"+sv.name, func(t *testing.T) {
				c := DefaultConfig()
				c.HiddenSize, c.EmbeddingSize = 4, 3
				c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.5, "uniform"
				cv.set(&c)
				sv.set(&c)
				const B, T = 2, 3
				f := newFixture(t, c, 5, B, T, 11)
				var h0, c0 [][]float64
				for _, lw := range f.w.layers {
					h0 = append(h0, append([]float64(nil), lw.h[:B*c.HiddenSize]...))
					if lw.c != nil {
						c0 = append(c0, append([]float64(nil), lw.c[:B*c.HiddenSize]...))
					}
				}
				want := f.lossAt()
				got := f.gradients()
				loss, ref := gorgoniaGraph(t, f.m, h0, c0, f.inputs, f.targets, B, T)
				if !closeTo(want, loss, gorgoniaTol) {
					t.Errorf("loss: weft %.17g, gorgonia %.17g", want, loss)
				}
				for i, p := range f.m.Params() {
					var mag float64
					for _, v := range ref[p.Name] {
						mag = max(mag, v, -v)
					}
					if mag < 1e-6 {
						t.Errorf("%s: gorgonia gradient is (nearly) zero, max |g| = %g: the comparison would be vacuous", p.Name, mag)
					}
					for j := range p.Grad {
						d := got[i][j] - ref[p.Name][j]
						worst = max(worst, max(d, -d))
						if !closeTo(got[i][j], ref[p.Name][j], gorgoniaTol) {
							t.Errorf("%s[%d]: weft %.17g, gorgonia %.17g", p.Name, j, got[i][j], ref[p.Name][j])
							break
						}
					}
				}
			})
		}
	}
	t.Logf("largest absolute gradient difference from gorgonia: %.3g", worst)
}
