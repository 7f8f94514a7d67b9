package rnn

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// Tolerances of the finite-difference check. Relative errors of 1e-9 to
// 1e-8 are typical for small recurrent nets done right in float64 (common
// practice; PyTorch's gradcheck defaults to eps 1e-6, atol 1e-5, rtol
// 1e-3); the test asks for below 1e-6.
const (
	// fdStep is h of the fourth-order central difference
	// f′ ≈ (8(f(θ+h) − f(θ−h)) − (f(θ+2h) − f(θ−2h))) / 12h
	// (Abramowitz & Stegun 1964, 25.3.6), truncation error O(h⁴): it keeps
	// the roundoff of tiny gradients (deep layers, 1e-5) well under the
	// tolerance, where the two-point rule at h = 1e-6 did not.
	fdStep   = 1e-4
	fdRelTol = 1e-6 // norm-wise ‖g_fd − g‖ / ‖g_fd‖ per tensor
)

// gradCase is one tiny network for the gradient checks.
type gradCase struct {
	name string
	cfg  Config
}

func gradCases() []gradCase {
	var cases []gradCase
	cells := []struct {
		name string
		set  func(*Config)
	}{
		{"rnn-tanh", func(c *Config) { c.Cell, c.Activation = "rnn", "tanh" }},
		{"rnn-relu", func(c *Config) { c.Cell, c.Activation = "rnn", "relu" }},
		{"gru-reset-after", func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_after" }},
		{"gru-reset-before", func(c *Config) { c.Cell, c.GRUForm = "gru", "reset_before" }},
		{"lstm", func(c *Config) { c.Cell = "lstm" }},
	}
	for _, cl := range cells {
		for _, layers := range []int{1, 2} {
			for _, tied := range []bool{false, true} {
				c := DefaultConfig()
				cl.set(&c)
				c.Layers, c.HiddenSize, c.EmbeddingSize = layers, 4, 3
				c.TieEmbeddings = tied
				if tied {
					c.ProjectionSize = 3 // the output layer's input must be E wide
				}
				c.Init, c.InitRange = "uniform", 0.5
				c.RecurrentInit = "uniform"
				cases = append(cases, gradCase{fmt.Sprintf("%s/layers=%d/tied=%v", cl.name, layers, tied), c})
			}
		}
		// One-hot input, and dropout, once per cell.
		c := DefaultConfig()
		cl.set(&c)
		c.HiddenSize, c.EmbeddingSize, c.Init, c.InitRange, c.RecurrentInit = 4, 0, "uniform", 0.5, "uniform"
		cases = append(cases, gradCase{cl.name + "/one-hot", c})
		c = DefaultConfig()
		cl.set(&c)
		c.Layers, c.HiddenSize, c.EmbeddingSize, c.Dropout = 2, 4, 3, 0.3
		c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.5, "uniform"
		cases = append(cases, gradCase{cl.name + "/dropout", c})
	}
	// The class-based output layer (output.go), over the 6 ids of the
	// fixture: classes of 2 ids, of 3 ids tied through a projection, and
	// of 1 to 2 ids with one-hot input and dropout.
	for _, cc := range []struct {
		name    string
		cell    string
		classes int
		tied    bool
		drop    float64
		emb     int
	}{
		{"lstm/class=3", "lstm", 3, false, 0, 3},
		{"gru/class=2/tied", "gru", 2, true, 0, 3},
		{"rnn/class=4/one-hot/dropout", "rnn", 4, false, 0.3, 0},
	} {
		c := DefaultConfig()
		c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize, c.Dropout = cc.cell, 2, 4, cc.emb, cc.drop
		c.OutputLayer, c.OutputClasses, c.TieEmbeddings = "class", cc.classes, cc.tied
		if cc.tied {
			c.ProjectionSize = 3
		}
		c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.5, "uniform"
		cases = append(cases, gradCase{cc.name, c})
	}
	return cases
}

// windowFixture is a model with a carried state from one earlier window, and
// the inputs and targets of the window under test.
type windowFixture struct {
	m       *Model[float64]
	w       *work[float64]
	inputs  []int
	targets []int
	steps   int
}

func newFixture(t testing.TB, cfg Config, vocab, B, steps int, seed uint64) *windowFixture {
	t.Helper()
	m, err := NewModel[float64](cfg, vocab, seed)
	if err != nil {
		t.Fatal(err)
	}
	// Non-zero biases so that every bias gradient path is exercised.
	rng := rand.New(rand.NewPCG(seed, 99))
	for _, p := range m.Params() {
		for i := range p.Value {
			if len(p.Shape) == 1 {
				p.Value[i] = 0.3 * (2*rng.Float64() - 1)
			}
		}
	}
	w := newWork(m, B, steps, true)
	draw := func() ([]int, []int) {
		in, tg := make([]int, B*steps), make([]int, B*steps)
		for i := range in {
			in[i] = rng.IntN(vocab)
			tg[i] = rng.IntN(vocab)
		}
		tg[1] = -1 // a skipped position
		return in, tg
	}
	// The earlier window: its final state is carried in.
	prevIn, _ := draw()
	w.forward(nil, prevIn, steps, false)
	w.carry(steps)
	in, tg := draw()
	w.drawMasks(rng, steps)
	return &windowFixture{m: m, w: w, inputs: in, targets: tg, steps: steps}
}

// lossAt is the mean cross-entropy of the window, in nats.
func (f *windowFixture) lossAt() float64 {
	f.w.forward(nil, f.inputs, f.steps, true)
	total, n := f.w.loss(f.targets)
	return total / float64(n)
}

// gradients runs the analytic backward pass and returns a copy of every
// parameter's gradient.
func (f *windowFixture) gradients() [][]float64 {
	f.m.ZeroGrad()
	f.w.forward(nil, f.inputs, f.steps, true)
	f.w.loss(f.targets)
	f.w.backward(nil)
	var out [][]float64
	for _, p := range f.m.Params() {
		out = append(out, append([]float64(nil), p.Grad...))
	}
	return out
}

func TestGradientsFiniteDifferences(t *testing.T) {
	worst, worstAt := 0.0, ""
	for _, tc := range gradCases() {
		t.Run(tc.name, func(t *testing.T) {
			f := newFixture(t, tc.cfg, 6, 2, 4, 7)
			got := f.gradients()
			for pi, p := range f.m.Params() {
				fd := make([]float64, len(p.Value))
				for i := range p.Value {
					v := p.Value[i]
					at := func(d float64) float64 {
						p.Value[i] = v + d
						return f.lossAt()
					}
					h := fdStep
					fd[i] = (8*(at(h)-at(-h)) - (at(2*h) - at(-2*h))) / (12 * h)
					p.Value[i] = v
				}
				rel := relErr(got[pi], fd)
				if rel > worst {
					worst, worstAt = rel, tc.name+" "+p.Name
				}
				if rel > fdRelTol {
					t.Errorf("%s: norm-wise relative error %.3g > %g\n got  %v\n want %v", p.Name, rel, fdRelTol, got[pi], fd)
				}
			}
		})
	}
	t.Logf("worst norm-wise relative error over all tensors: %.3g (%s)", worst, worstAt)
}

// relErr is ‖a−b‖₂ / max(‖b‖₂, tiny).
func relErr(a, b []float64) float64 {
	var d, n float64
	for i := range a {
		d += (a[i] - b[i]) * (a[i] - b[i])
		n += b[i] * b[i]
	}
	return math.Sqrt(d) / math.Max(math.Sqrt(n), 1e-300)
}
