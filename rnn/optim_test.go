package rnn

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"weft/rnn/linalg"
)

// optTol is the tolerance on hand-computed optimizer steps: the hand
// values below are rounded to 9-10 significant digits.
const optTol = 1e-9

// close reports whether got is within tol of want, absolutely or relative
// to |want|.
func closeTo(got, want, tol float64) bool {
	d := math.Abs(got - want)
	return d <= tol || d <= tol*math.Abs(want)
}

func oneParam(theta ...float64) []Param[float64] {
	return []Param[float64]{{Name: "w", Shape: []int{len(theta)}, Value: append([]float64(nil), theta...), Grad: make([]float64, len(theta))}}
}

func TestOptimizerSteps(t *testing.T) {
	g1, g2 := []float64{0.5, 0.25}, []float64{1.0, -0.25}
	tests := []struct {
		name  string
		set   func(*TrainConfig)
		grads [][]float64
		want  []float64 // θ after the steps, from θ₀ = (1, −2)
	}{
		// Plain SGD, η = 0.1: θ − ηg = (1 − 0.05, −2 − 0.025).
		{"sgd", func(c *TrainConfig) { c.Optimizer, c.LearningRate = "sgd", 0.1 }, [][]float64{g1}, []float64{0.95, -2.025}},
		// SGD with λ = 0.1: g + λθ = (0.6, 0.05); θ = (1 − 0.06, −2 − 0.005).
		{"sgd/weight_decay", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.WeightDecay = "sgd", 0.1, 0.1 }, [][]float64{g1}, []float64{0.94, -2.005}},
		// Heavy ball μ = 0.9, g₁ twice: v₁ = (0.5, 0.25), θ₁ = (0.95, −2.025);
		// v₂ = 0.9·v₁ + g = (0.95, 0.475), θ₂ = θ₁ − 0.1·v₂ = (0.855, −2.0725).
		{"sgd/momentum", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.Momentum = "sgd", 0.1, 0.9 }, [][]float64{g1, g1}, []float64{0.855, -2.0725}},
		// Nesterov μ = 0.9, g₁ twice: v₁ = (0.5, 0.25), step g + μv₁ = (0.95, 0.475),
		// θ₁ = (0.905, −2.0475); v₂ = (0.95, 0.475), step g + μv₂ = (1.355, 0.6775),
		// θ₂ = (0.905 − 0.1355, −2.0475 − 0.06775) = (0.7695, −2.11525).
		{"sgd/nesterov", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.Momentum, c.Nesterov = "sgd", 0.1, 0.9, true }, [][]float64{g1, g1}, []float64{0.7695, -2.11525}},
		// AdaGrad η = 0.1, g₁ twice: G₁ = (0.25, 0.0625), θ₁ = (1 − 0.1·0.5/0.5, −2 − 0.1·0.25/0.25) = (0.9, −2.1);
		// G₂ = (0.5, 0.125), θ₂ = θ₁ − 0.1·(0.5/√0.5, 0.25/√0.125) = θ₁ − 0.1·(0.70710678, 0.70710678).
		{"adagrad", func(c *TrainConfig) { c.Optimizer, c.LearningRate = "adagrad", 0.1 }, [][]float64{g1, g1}, []float64{0.829289322, -2.170710678}},
		// RMSprop ρ = 0.9, η = 0.01, g₁ twice: s₁ = 0.1·g² = (0.025, 0.00625), g/√s₁ = (3.16227766, 3.16227766),
		// θ₁ = (0.9683772234, −2.0316227766); s₂ = 0.9·s₁ + 0.1·g² = (0.0475, 0.011875),
		// g/√s₂ = (2.294157339, 2.294157339), θ₂ = θ₁ − 0.01·2.294157339.
		{"rmsprop", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.RMSDecay = "rmsprop", 0.01, 0.9 }, [][]float64{g1, g1}, []float64{0.9454356500, -2.0545643500}},
		// Adam (Kingma & Ba 2015, Alg. 1) η = 0.1, β = (0.9, 0.999): step 1 with g₁ gives
		// m̂ = g, v̂ = g², so θ₁ = θ₀ − η·sign(g) = (0.9, −2.1) (their §2.1: |Δ| ≈ α at start).
		// Step 2 with g₂ = (1, −0.25): m = (0.145, −0.0025), m̂ = m/0.19 = (0.763157895, −0.0131578947);
		// v = (0.00124975, 0.0001249375), v̂ = v/0.001999 = (0.625187594, 0.0625);
		// Δ = η m̂/√v̂ = (0.0965182026, −0.00526315789).
		{"adam", func(c *TrainConfig) { c.Optimizer, c.LearningRate = "adam", 0.1 }, [][]float64{g1, g2}, []float64{0.8034817974, -2.0947368421}},
		// Adam with coupled λ = 0.1: g + λθ = (0.6, 0.05) still has the signs of g, so
		// step 1 again moves by η·sign: (0.9, −2.1).
		{"adam/weight_decay", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.WeightDecay = "adam", 0.1, 0.1 }, [][]float64{g1}, []float64{0.9, -2.1}},
		// AdamW (Loshchilov & Hutter 2019, Alg. 2) λ = 0.1: θ₁ = θ₀ − η(sign(g) + λθ₀)
		// = (1 − 0.1·1.1, −2 − 0.1·(1 − 0.2)) = (0.89, −2.08).
		{"adamw", func(c *TrainConfig) { c.Optimizer, c.LearningRate, c.WeightDecay = "adamw", 0.1, 0.1 }, [][]float64{g1}, []float64{0.89, -2.08}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg := DefaultTrainConfig()
			cfg.Epsilon = 1e-12 // small enough not to show in 10 digits
			tc.set(&cfg)
			ps := oneParam(1, -2)
			opt, err := NewOptimizer(cfg, ps)
			if err != nil {
				t.Fatal(err)
			}
			for _, g := range tc.grads {
				copy(ps[0].Grad, g)
				opt.Step(cfg.LearningRate)
			}
			for i, want := range tc.want {
				if got := ps[0].Value[i]; !closeTo(got, want, optTol) {
					t.Errorf("θ[%d]: got %.12g, want %.12g", i, got, want)
				}
			}
			if got := opt.State().Steps; got != int64(len(tc.grads)) {
				t.Errorf("steps: got %d, want %d", got, len(tc.grads))
			}
		})
	}
}

// TestOptimizerStateRestore checks that an optimizer rebuilt from the
// exported state continues exactly as the original.
func TestOptimizerStateRestore(t *testing.T) {
	for _, name := range []string{"sgd", "adagrad", "rmsprop", "adam", "adamw"} {
		t.Run(name, func(t *testing.T) {
			cfg := DefaultTrainConfig()
			cfg.Optimizer, cfg.Momentum, cfg.WeightDecay = name, 0, 0.01
			if name == "sgd" {
				cfg.Momentum = 0.9
			}
			a := oneParam(1, -2, 3)
			oa, _ := NewOptimizer(cfg, a)
			grads := [][]float64{{0.1, 0.2, -0.3}, {0.5, -0.1, 0.2}, {-0.2, 0.3, 0.1}}
			copy(a[0].Grad, grads[0])
			oa.Step(0.01)
			// Restore into a fresh optimizer and parameter copy.
			b := oneParam(a[0].Value...)
			ob, _ := NewOptimizer(cfg, b)
			if len(ob.StateTensors()) != len(oa.StateTensors()) {
				t.Fatalf("state tensors: got %d, want %d", len(ob.StateTensors()), len(oa.StateTensors()))
			}
			for i, st := range oa.StateTensors() {
				copy(ob.StateTensors()[i].Value, st.Value)
			}
			if err := ob.SetState(oa.State()); err != nil {
				t.Fatal(err)
			}
			for _, g := range grads[1:] {
				copy(a[0].Grad, g)
				copy(b[0].Grad, g)
				oa.Step(0.01)
				ob.Step(0.01)
			}
			for i := range a[0].Value {
				if a[0].Value[i] != b[0].Value[i] {
					t.Errorf("θ[%d]: restored %v, original %v", i, b[0].Value[i], a[0].Value[i])
				}
			}
			if err := ob.SetState(OptimizerState{Name: "other"}); err == nil {
				t.Error("SetState accepted another optimizer's state")
			}
		})
	}
}

func TestClipping(t *testing.T) {
	// Pascanu et al. 2013, Alg. 1: g ← (threshold/‖g‖) g when ‖g‖ > threshold.
	// (3, 4) has norm 5; clipped to 1 it is (0.6, 0.8).
	ps := []Param[float64]{
		{Name: "a", Shape: []int{1}, Value: []float64{0}, Grad: []float64{3}},
		{Name: "b", Shape: []int{1}, Value: []float64{0}, Grad: []float64{4}},
	}
	if got := ClipGlobalNorm(ps, 1); !closeTo(got, 5, 1e-15) {
		t.Errorf("pre-clip norm: got %v, want 5", got)
	}
	if !closeTo(ps[0].Grad[0], 0.6, 1e-15) || !closeTo(ps[1].Grad[0], 0.8, 1e-15) {
		t.Errorf("clipped: got (%v, %v), want (0.6, 0.8)", ps[0].Grad[0], ps[1].Grad[0])
	}
	// Below the threshold nothing changes.
	ps[0].Grad[0], ps[1].Grad[0] = 3, 4
	if got := ClipGlobalNorm(ps, 10); got != 5 || ps[0].Grad[0] != 3 || ps[1].Grad[0] != 4 {
		t.Errorf("unclipped: got norm %v grads (%v, %v), want 5 (3, 4)", got, ps[0].Grad[0], ps[1].Grad[0])
	}
	// By value: each element clamped to [−1, 1].
	v := oneParam(0, 0, 0, 0)
	copy(v[0].Grad, []float64{-3, 0.5, 2, -1})
	ClipValue(v, 1)
	for i, want := range []float64{-1, 0.5, 1, -1} {
		if v[0].Grad[i] != want {
			t.Errorf("clip value [%d]: got %v, want %v", i, v[0].Grad[i], want)
		}
	}
}

func TestSchedules(t *testing.T) {
	base := DefaultTrainConfig()
	base.LearningRate = 1
	type point struct {
		t    int64
		want float64
	}
	tests := []struct {
		name   string
		set    func(*TrainConfig)
		points []point
	}{
		{"constant", func(c *TrainConfig) {}, []point{{0, 1}, {1000, 1}}},
		// η₀ γ^⌊t/s⌋ with γ = 0.5, s = 10.
		{"step", func(c *TrainConfig) { c.Schedule, c.DecayEverySteps, c.DecayFactor = "step", 10, 0.5 },
			[]point{{0, 1}, {9, 1}, {10, 0.5}, {25, 0.25}}},
		// Warm-up (t+1)/w over w = 10, then (1+cos(πp))/2 over 100 steps:
		// p = 0.5 at t = 60 gives 0.5; p = 1 at t = 110 gives η_min = 0.
		{"cosine", func(c *TrainConfig) { c.Schedule, c.WarmupSteps, c.CosineSteps = "cosine", 10, 110 },
			[]point{{0, 0.1}, {4, 0.5}, {9, 1}, {10, 1}, {35, (1 + math.Cos(math.Pi/4)) / 2}, {60, 0.5}, {110, 0}, {500, 0}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c := base
			tc.set(&c)
			s, err := NewSchedule(c)
			if err != nil {
				t.Fatal(err)
			}
			for _, p := range tc.points {
				if got := s.Rate(p.t); !closeTo(got, p.want, 1e-12) {
					t.Errorf("Rate(%d): got %v, want %v", p.t, got, p.want)
				}
			}
		})
	}
	t.Run("plateau", func(t *testing.T) {
		c := base
		c.Schedule, c.PlateauDivisor, c.PlateauPatience = "plateau", 2, 1
		s, _ := NewSchedule(c)
		// losses → (divided?, rate after): patience 1 tolerates one bad validation.
		steps := []struct {
			loss    float64
			divided bool
			rate    float64
		}{
			{3, false, 1}, {2, false, 1}, {2.5, false, 1}, {2.4, true, 0.5},
			{1.9, false, 0.5}, {1.9, false, 0.5}, {1.95, true, 0.25},
		}
		for i, st := range steps {
			if got := s.ReportValidation(st.loss); got != st.divided {
				t.Errorf("report %d (%v): divided %v, want %v", i, st.loss, got, st.divided)
			}
			if got := s.Rate(0); got != st.rate {
				t.Errorf("report %d: rate %v, want %v", i, got, st.rate)
			}
		}
		// A scale multiplies the rate and is part of the state.
		if err := s.SetScale(0.5); err != nil || s.Rate(0) != 0.125 {
			t.Errorf("scaled rate: got %v (%v), want 0.125", s.Rate(0), err)
		}
		if err := s.SetScale(0); err == nil {
			t.Error("SetScale(0) accepted")
		}
		// The state round-trips.
		s2, _ := NewSchedule(c)
		if err := s2.SetState(s.State()); err != nil || s2.Rate(0) != 0.125 || s2.State() != s.State() {
			t.Errorf("restored schedule: rate %v state %+v err %v", s2.Rate(0), s2.State(), err)
		}
	})
}

func TestConfigValidate(t *testing.T) {
	if err := DefaultConfig().Validate(); err != nil {
		t.Errorf("default model config: %v", err)
	}
	if err := DefaultTrainConfig().Validate(); err != nil {
		t.Errorf("default training config: %v", err)
	}
	bad := []struct {
		name string
		set  func(*Config)
		want string
	}{
		{"hidden", func(c *Config) { c.HiddenSize = 0 }, "model.hidden_size must be at least 1, got 0"},
		{"cell", func(c *Config) { c.Cell = "xlstm" }, `model.cell must be "rnn", "gru" or "lstm", got "xlstm"`},
		{"tie one-hot", func(c *Config) { c.TieEmbeddings, c.EmbeddingSize = true, 0 }, "model.tie_embeddings needs model.embedding_size > 0 (one-hot input has no embedding to tie)"},
		{"tie sizes", func(c *Config) { c.TieEmbeddings = true }, "model.tie_embeddings needs model.hidden_size (256) to equal model.embedding_size (64); set model.projection_size = 64 to tie them"},
		{"dropout", func(c *Config) { c.Dropout = 1 }, "model.dropout must be in [0, 1), got 1"},
	}
	for _, tc := range bad {
		c := DefaultConfig()
		tc.set(&c)
		err := c.Validate()
		if err == nil || err.Error() != tc.want {
			t.Errorf("%s: got %v, want %q", tc.name, err, tc.want)
		}
	}
	tc := DefaultTrainConfig()
	tc.Nesterov = true
	if err := tc.Validate(); err == nil || err.Error() != "training.nesterov needs training.momentum > 0" {
		t.Errorf("nesterov without momentum: got %v", err)
	}
	tc = DefaultTrainConfig()
	tc.Schedule = "cosine"
	if err := tc.Validate(); err == nil || err.Error() != `training.schedule "cosine" needs training.cosine_steps, training.max_steps or a time budget (--for, --until, training.max_duration)` {
		t.Errorf("cosine without length: got %v", err)
	}
}

// TestOptimizerThreadsBitIdentical checks that the parallel update, norm
// and clipping of issue 17 give the same bits on 1, 2, 16 and 64 threads,
// for every optimizer, with both clipping rules active, on parameters of
// ragged sizes (some empty, some a fraction of a chunk) large enough that
// every pass is split into many ranges.
func TestOptimizerThreadsBitIdentical(t *testing.T) {
	sizes := []int{7, 0, 20000, 3, 4099, 150000, 1, 0, 77777}
	total := 0
	for _, n := range sizes {
		total += n
	}
	if total/updateGrain < 16 || total/normChunk < 16 {
		t.Fatalf("%d elements form fewer than 16 ranges: the test would not split", total)
	}
	pools := []*linalg.Pool{nil, linalg.NewPool(2), linalg.NewPool(16), linalg.NewPool(64)}
	defer func() {
		for _, p := range pools {
			p.Close()
		}
	}()
	for _, name := range []string{"sgd", "adagrad", "rmsprop", "adam", "adamw"} {
		t.Run(name, func(t *testing.T) {
			cfg := DefaultTrainConfig()
			cfg.Optimizer, cfg.WeightDecay, cfg.ClipNorm, cfg.ClipValue = name, 0.01, 1, 0.004
			if name == "sgd" {
				cfg.Momentum = 0.9
			}
			run := func(p *linalg.Pool) ([]float32, []float64) {
				rng := rand.New(rand.NewPCG(3, 4))
				var ps []Param[float32]
				for i, n := range sizes {
					v, g := make([]float32, n), make([]float32, n)
					for j := range v {
						v[j] = float32(rng.NormFloat64())
					}
					ps = append(ps, Param[float32]{Name: fmt.Sprint("p", i), Shape: []int{n}, Value: v, Grad: g})
				}
				opt, err := NewOptimizer(cfg, ps)
				if err != nil {
					t.Fatal(err)
				}
				opt.(pooled).setPool(p)
				loop := newParamLoop(ps)
				var norms []float64
				for step := 0; step < 3; step++ {
					for _, q := range ps {
						for j := range q.Grad {
							q.Grad[j] = float32(rng.NormFloat64() * 0.01)
						}
					}
					norms = append(norms, loop.clipNorm(p, cfg.ClipNorm))
					loop.clipValue(p, cfg.ClipValue)
					opt.Step(0.01)
				}
				var out []float32
				for _, q := range ps {
					out = append(out, q.Value...)
				}
				for _, st := range opt.StateTensors() {
					out = append(out, st.Value...)
				}
				return out, norms
			}
			want, wantNorms := run(nil)
			for _, p := range pools[1:] {
				got, norms := run(p)
				if k := sameBits(want, got); k >= 0 {
					t.Errorf("threads=%d: value or state %d got %v want %v (1 thread)", p.Threads(), k, got[k], want[k])
				}
				for s := range norms {
					if math.Float64bits(norms[s]) != math.Float64bits(wantNorms[s]) {
						t.Errorf("threads=%d: step %d norm got %v want %v (1 thread)", p.Threads(), s, norms[s], wantNorms[s])
					}
				}
			}
			// The norms clipped (σ = 0.01 over ~250k elements: about 5 > 1).
			if wantNorms[0] <= cfg.ClipNorm {
				t.Errorf("norm %v does not exceed clip_norm %v: clipping was not exercised", wantNorms[0], cfg.ClipNorm)
			}
		})
	}
}

// TestGlobalNormChunks checks the chunked sum of GlobalNorm against the
// plain definition √(Σ g²) summed in one float64 loop (tolerance: float64
// rounding over 10^5 terms, common practice), across parameter
// boundaries that fall inside chunks.
func TestGlobalNormChunks(t *testing.T) {
	const tol = 1e-12
	rng := rand.New(rand.NewPCG(5, 6))
	var ps []Param[float32]
	var ss float64
	for _, n := range []int{5000, 1, 0, 100000, 4095} {
		g := make([]float32, n)
		for j := range g {
			g[j] = float32(rng.NormFloat64())
			ss += float64(g[j]) * float64(g[j])
		}
		ps = append(ps, Param[float32]{Name: "p", Shape: []int{n}, Value: make([]float32, n), Grad: g})
	}
	if got, want := GlobalNorm(ps), math.Sqrt(ss); !closeTo(got, want, tol) {
		t.Errorf("got %v want %v", got, want)
	}
}
