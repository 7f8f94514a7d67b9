package rnn

import (
	"fmt"
	"math"

	"weft/rnn/linalg"
)

// Optimizer updates a model's parameters from their gradients. Each
// implementation follows its published update rule, stated on its type;
// updates are computed in float64 per element and stored back as T. Each
// element's update reads only that element's parameter, gradient and state,
// so a Trainer splits Step over its pool's threads with the same bits on
// any number of threads.
//
// The full state is exposed for checkpoints: StateTensors lists live views
// of every per-parameter slot, named "optim.<slot>.<parameter name>" with the
// parameter's shape, and State the scalars. To restore, copy saved values
// into the StateTensors views and call SetState.
type Optimizer[T Float] interface {
	// Name is the training.optimizer value: "sgd", "adagrad", "rmsprop",
	// "adam" or "adamw".
	Name() string
	// Step applies one update with learning rate lr to every parameter.
	Step(lr float64)
	// StateTensors lists the per-parameter state (empty for plain SGD).
	StateTensors() []Tensor[T]
	// State returns the scalar state.
	State() OptimizerState
	// SetState restores the scalar state; it fails when s is for another
	// optimizer.
	SetState(s OptimizerState) error
}

// OptimizerState is the scalar part of an optimizer's state, JSON-able.
type OptimizerState struct {
	Name  string `json:"name"`
	Steps int64  `json:"steps"` // updates applied so far (Adam's t)
}

// NewOptimizer returns the optimizer cfg.Optimizer names, with its
// coefficients from cfg, for the given parameters (normally
// Model.Params()).
func NewOptimizer[T Float](cfg TrainConfig, params []Param[T]) (Optimizer[T], error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	b := optBase[T]{params: params, name: cfg.Optimizer, wd: cfg.WeightDecay, eps: cfg.Epsilon, loop: newParamLoop(params)}
	switch cfg.Optimizer {
	case "sgd":
		o := &sgd[T]{optBase: b, mu: cfg.Momentum, nesterov: cfg.Nesterov}
		if o.mu > 0 {
			o.v = o.slot("velocity")
		}
		o.loop.upd = o
		return o, nil
	case "adagrad":
		o := &adagrad[T]{optBase: b}
		o.g2 = o.slot("sum_sq")
		o.loop.upd = o
		return o, nil
	case "rmsprop":
		o := &rmsprop[T]{optBase: b, rho: cfg.RMSDecay}
		o.s = o.slot("mean_sq")
		o.loop.upd = o
		return o, nil
	default: // adam, adamw
		o := &adam[T]{optBase: b, b1: cfg.Beta1, b2: cfg.Beta2, decoupled: cfg.Optimizer == "adamw"}
		o.m = o.slot("m")
		o.v = o.slot("v")
		o.loop.upd = o
		return o, nil
	}
}

// pooled is implemented by every optimizer of this package: setPool makes
// Step split its elements over p's threads (nil: the caller alone).
type pooled interface{ setPool(p *linalg.Pool) }

type optBase[T Float] struct {
	params  []Param[T]
	name    string
	wd, eps float64
	steps   int64
	tensors []Tensor[T]
	loop    *paramLoop[T] // the elements, split over pool's threads
	pool    *linalg.Pool
	lr      float64 // the rate of the running Step
}

func (o *optBase[T]) setPool(p *linalg.Pool) { o.pool = p }

// run applies the optimizer's update to every element.
func (o *optBase[T]) run(lr float64) {
	o.lr = lr
	o.loop.run(o.pool, paramUpdate)
}

// slot allocates one state slot shaped like the parameters, in one block,
// and returns one view per parameter.
func (o *optBase[T]) slot(name string) [][]T {
	n := 0
	for _, p := range o.params {
		n += len(p.Value)
	}
	buf := make([]T, n)
	views := make([][]T, len(o.params))
	off := 0
	for i, p := range o.params {
		views[i] = buf[off : off+len(p.Value) : off+len(p.Value)]
		off += len(p.Value)
		o.tensors = append(o.tensors, Tensor[T]{Name: "optim." + name + "." + p.Name, Shape: p.Shape, Value: views[i]})
	}
	return views
}

func (o *optBase[T]) Name() string              { return o.name }
func (o *optBase[T]) StateTensors() []Tensor[T] { return o.tensors }
func (o *optBase[T]) State() OptimizerState     { return OptimizerState{Name: o.name, Steps: o.steps} }
func (o *optBase[T]) SetState(s OptimizerState) error {
	if s.Name != o.name {
		return fmt.Errorf("optimizer state is for %q, not %q", s.Name, o.name)
	}
	if s.Steps < 0 {
		return fmt.Errorf("optimizer state: negative step count %d", s.Steps)
	}
	o.steps = s.Steps
	return nil
}

// sgd is stochastic gradient descent with optional momentum, in the form of
// Sutskever, Martens, Dahl & Hinton (2013) as general frameworks write it
// (common practice): with g = ∇θ + λθ,
//
//	v ← μ v + g
//	θ ← θ − η v               (heavy ball)
//	θ ← θ − η (g + μ v)       (Nesterov)
//
// and θ ← θ − η g when μ = 0.
type sgd[T Float] struct {
	optBase[T]
	mu       float64
	nesterov bool
	v        [][]T
}

func (o *sgd[T]) Step(lr float64) {
	o.steps++
	o.run(lr)
}

func (o *sgd[T]) update(pi, i0, i1 int) {
	p, lr := o.params[pi], o.lr
	for i := i0; i < i1; i++ {
		gv := p.Grad[i]
		th := float64(p.Value[i])
		g := float64(gv) + o.wd*th
		if o.mu > 0 {
			v := o.mu*float64(o.v[pi][i]) + g
			o.v[pi][i] = T(v)
			if o.nesterov {
				g += o.mu * v
			} else {
				g = v
			}
		}
		p.Value[i] = T(th - lr*g)
	}
}

// adagrad is the diagonal AdaGrad of Duchi, Hazan & Singer (2011): with
// g = ∇θ + λθ,
//
//	G ← G + g²
//	θ ← θ − η g / (√G + ε)
type adagrad[T Float] struct {
	optBase[T]
	g2 [][]T
}

func (o *adagrad[T]) Step(lr float64) {
	o.steps++
	o.run(lr)
}

func (o *adagrad[T]) update(pi, i0, i1 int) {
	p, lr := o.params[pi], o.lr
	for i := i0; i < i1; i++ {
		gv := p.Grad[i]
		th := float64(p.Value[i])
		g := float64(gv) + o.wd*th
		s := float64(o.g2[pi][i]) + g*g
		o.g2[pi][i] = T(s)
		p.Value[i] = T(th - lr*g/(math.Sqrt(s)+o.eps))
	}
}

// rmsprop is RMSprop (Tieleman & Hinton 2012, lecture 6.5): with
// g = ∇θ + λθ,
//
//	s ← ρ s + (1 − ρ) g²
//	θ ← θ − η g / (√s + ε)
type rmsprop[T Float] struct {
	optBase[T]
	rho float64
	s   [][]T
}

func (o *rmsprop[T]) Step(lr float64) {
	o.steps++
	o.run(lr)
}

func (o *rmsprop[T]) update(pi, i0, i1 int) {
	p, lr := o.params[pi], o.lr
	for i := i0; i < i1; i++ {
		gv := p.Grad[i]
		th := float64(p.Value[i])
		g := float64(gv) + o.wd*th
		s := o.rho*float64(o.s[pi][i]) + (1-o.rho)*g*g
		o.s[pi][i] = T(s)
		p.Value[i] = T(th - lr*g/(math.Sqrt(s)+o.eps))
	}
}

// adam is Adam (Kingma & Ba 2015, Algorithm 1), and with decoupled set
// AdamW (Loshchilov & Hutter 2019, Algorithm 2). At update t, with g = ∇θ
// for AdamW and g = ∇θ + λθ for Adam,
//
//	m ← β₁ m + (1 − β₁) g
//	v ← β₂ v + (1 − β₂) g²
//	m̂ = m / (1 − β₁ᵗ),  v̂ = v / (1 − β₂ᵗ)
//	θ ← θ − η m̂ / (√v̂ + ε)                  (Adam)
//	θ ← θ − η (m̂ / (√v̂ + ε) + λ θ)          (AdamW)
//
// where for AdamW η is the scheduled rate, the paper's η_t·α (the paper
// decays by η_t λ θ; frameworks and weft scale λ by the rate, common
// practice).
type adam[T Float] struct {
	optBase[T]
	b1, b2    float64
	decoupled bool
	m, v      [][]T
	c1, c2    float64 // bias corrections of the running Step
}

func (o *adam[T]) Step(lr float64) {
	o.steps++
	o.c1 = 1 - math.Pow(o.b1, float64(o.steps))
	o.c2 = 1 - math.Pow(o.b2, float64(o.steps))
	o.run(lr)
}

func (o *adam[T]) update(pi, i0, i1 int) {
	p, lr, c1, c2 := o.params[pi], o.lr, o.c1, o.c2
	mm, vv := o.m[pi], o.v[pi]
	for i := i0; i < i1; i++ {
		gv := p.Grad[i]
		th := float64(p.Value[i])
		g := float64(gv)
		if !o.decoupled {
			g += o.wd * th
		}
		m := o.b1*float64(mm[i]) + (1-o.b1)*g
		v := o.b2*float64(vv[i]) + (1-o.b2)*g*g
		mm[i], vv[i] = T(m), T(v)
		u := (m / c1) / (math.Sqrt(v/c2) + o.eps)
		if o.decoupled {
			u += o.wd * th
		}
		p.Value[i] = T(th - lr*u)
	}
}

// GlobalNorm returns the L2 norm of all the gradients taken as one vector,
// ‖g‖₂ = √(Σ g²), summed in float64: the squares of each run of 4096
// elements of that vector (the parameters in Params order) in order, then
// those partial sums in order. A Trainer computes the partial sums on its
// pool's threads and gets the same bits.
func GlobalNorm[T Float](params []Param[T]) float64 {
	return newParamLoop(params).norm(nil)
}

// ClipGlobalNorm rescales all gradients by maxNorm/‖g‖₂ when their global
// norm ‖g‖₂ (GlobalNorm) exceeds maxNorm (Pascanu, Mikolov & Bengio 2013,
// Algorithm 1), and returns the norm before clipping. maxNorm ≤ 0 only
// measures.
func ClipGlobalNorm[T Float](params []Param[T], maxNorm float64) float64 {
	return newParamLoop(params).clipNorm(nil, maxNorm)
}

// ClipValue clamps every gradient element to [−limit, limit]; limit ≤ 0
// does nothing.
func ClipValue[T Float](params []Param[T], limit float64) {
	newParamLoop(params).clipValue(nil, limit)
}
