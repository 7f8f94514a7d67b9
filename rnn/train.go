package rnn

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"

	"weft/rnn/linalg"
)

// Window is one training window: B parallel streams advanced by T steps,
// time-major, so that the token of stream b at step t is Inputs[t*B+b] and
// Targets[t*B+b] is the token that follows it. A negative target marks a
// position that adds nothing to the loss. Reset, when not nil, has one flag
// per stream: a set flag starts that stream afresh (zero state) at this
// window, as at a document boundary.
type Window struct {
	B, T    int
	Inputs  []int
	Targets []int
	Reset   []bool
}

// StepInfo reports one update.
type StepInfo struct {
	Step         int64   // updates made so far, this one included (1 for the first)
	Tokens       int     // positions of the window that added to the loss
	Loss         float64 // mean cross-entropy over those positions, in nats per token
	GradNorm     float64 // global L2 norm of the gradient before clipping
	LearningRate float64 // the rate this update used
}

// Batches yields training windows. Next returns io.EOF when there are no
// more; Run then returns nil.
type Batches interface {
	Next(ctx context.Context) (Window, error)
}

// ErrNonFinite is returned (wrapped) by Step when the loss or the gradient
// norm is NaN or infinite. The update is then skipped and the carried state
// left as it was, so the caller may lower the rate or restore a checkpoint.
var ErrNonFinite = errors.New("non-finite loss or gradient")

// Trainer trains a model by truncated backpropagation through time: for
// each window it runs forward from the carried state, takes the mean
// cross-entropy, runs backward (cutting the gradient at the window start),
// clips, updates the parameters and carries the final state to the next
// window. It never prints or touches files. A Trainer is not safe for
// concurrent use; it owns its model while it trains.
type Trainer[T Float] struct {
	m     *Model[T]
	cfg   TrainConfig
	pool  *linalg.Pool
	opt   Optimizer[T]
	sched *Schedule
	pcg   *rand.PCG
	rng   *rand.Rand
	w     *work[T]
	clip  *paramLoop[T] // the gradients, for clipping on pool's threads

	step   int64
	tokens int64
	times  *PhaseTimes // nil: timing off (SetPhaseTimes)

	// BPTT(h; h′) replay (cfg.BPTTAdvanceSteps > 0).
	advance      int
	keep         int   // h − h′: steps replayed
	hist         []int // up to keep·B ids, time-major
	histK        int   // steps in hist
	in, tg       []int // combined window
	endH, endC   [][]T // state after the last real token, per layer
	stateTensors []Tensor[T]
}

// NewTrainer returns a trainer for m with a fresh optimizer and schedule.
// Dropout masks come from a PCG generator seeded with cfg.Seed (on its own
// stream, distinct from initialisation). pool may be nil; cfg.Threads is
// not read here: the caller sizes the pool from it
// (linalg.NewPool(threads); for zero, ChooseThreads gives the count) and
// closes it. The trainer runs the products, the gate loops, the optimizer
// update and the gradient clipping on the pool's threads.
func NewTrainer[T Float](m *Model[T], cfg TrainConfig, pool *linalg.Pool) (*Trainer[T], error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	opt, err := NewOptimizer(cfg, m.Params())
	if err != nil {
		return nil, err
	}
	sched, err := NewSchedule(cfg)
	if err != nil {
		return nil, err
	}
	mc := m.cfg
	R := float64(cfg.BatchSize) * float64(cfg.UnrollSteps)
	if n := R * float64(max(4*mc.HiddenSize, m.vocab, mc.EmbeddingSize, mc.ProjectionSize)); n > maxElements {
		return nil, fmt.Errorf("a window of training.batch_size %d × training.unroll_steps %d needs buffers of %.3g elements, more than the limit of %.3g", cfg.BatchSize, cfg.UnrollSteps, n, float64(maxElements))
	}
	if po, ok := opt.(pooled); ok {
		po.setPool(pool)
	}
	tr := &Trainer[T]{m: m, cfg: cfg, pool: pool, opt: opt, sched: sched, clip: newParamLoop(m.params)}
	tr.pcg = rand.NewPCG(cfg.Seed, trainStream)
	tr.rng = rand.New(tr.pcg)
	B, U := cfg.BatchSize, cfg.UnrollSteps
	tr.w = newWork(m, B, U, true)
	if a := cfg.BPTTAdvanceSteps; a > 0 && a < U {
		tr.advance, tr.keep = a, U-a
		tr.hist = make([]int, tr.keep*B)
		tr.in, tr.tg = make([]int, U*B), make([]int, U*B)
		n := B * m.cfg.HiddenSize
		for range m.layers {
			tr.endH = append(tr.endH, make([]T, n))
			if m.cell.hasCellState() {
				tr.endC = append(tr.endC, make([]T, n))
			}
		}
	}
	tr.stateTensors = append(tr.stateTensors, opt.StateTensors()...)
	H := m.cfg.HiddenSize
	for l := range tr.w.layers {
		lw := &tr.w.layers[l]
		p := fmt.Sprintf("state.layer.%d.", l)
		tr.stateTensors = append(tr.stateTensors, Tensor[T]{Name: p + "h", Shape: []int{B, H}, Value: lw.h[:B*H]})
		if lw.c != nil {
			tr.stateTensors = append(tr.stateTensors, Tensor[T]{Name: p + "c", Shape: []int{B, H}, Value: lw.c[:B*H]})
		}
		if tr.endH != nil {
			tr.stateTensors = append(tr.stateTensors, Tensor[T]{Name: p + "h_end", Shape: []int{B, H}, Value: tr.endH[l]})
			if tr.endC != nil {
				tr.stateTensors = append(tr.stateTensors, Tensor[T]{Name: p + "c_end", Shape: []int{B, H}, Value: tr.endC[l]})
			}
		}
	}
	return tr, nil
}

// Model returns the model being trained.
func (tr *Trainer[T]) Model() *Model[T] { return tr.m }

// Steps is the number of updates made so far.
func (tr *Trainer[T]) Steps() int64 { return tr.step }

// ReportValidation passes a validation loss to the learning-rate schedule
// and reports whether the (plateau) schedule divided the rate.
func (tr *Trainer[T]) ReportValidation(loss float64) bool { return tr.sched.ReportValidation(loss) }

// Tokens is the number of positions trained on so far.
func (tr *Trainer[T]) Tokens() int64 { return tr.tokens }

// Schedule returns the learning-rate schedule; its state is part of State.
func (tr *Trainer[T]) Schedule() *Schedule { return tr.sched }

// ScaleLearningRate multiplies every later learning rate by f (on top of
// earlier scalings), as a divergence guard does after restoring a
// checkpoint. The scale is part of the schedule's state.
func (tr *Trainer[T]) ScaleLearningRate(f float64) error {
	return tr.sched.SetScale(tr.sched.Scale() * f)
}

// LearningRate is the rate the next update will use.
func (tr *Trainer[T]) LearningRate() float64 { return tr.sched.Rate(tr.step) }

// checkWindow validates a window from the batches (user data: errors, not
// panics).
func (tr *Trainer[T]) checkWindow(win Window) error {
	B, V := tr.cfg.BatchSize, tr.m.vocab
	if win.B != B {
		return fmt.Errorf("window has %d streams, training.batch_size is %d", win.B, B)
	}
	if tr.advance > 0 {
		if win.T != tr.advance {
			return fmt.Errorf("window has %d steps, training.bptt_advance_steps is %d", win.T, tr.advance)
		}
	} else if win.T < 1 || win.T > tr.cfg.UnrollSteps {
		return fmt.Errorf("window has %d steps, want 1 to training.unroll_steps (%d)", win.T, tr.cfg.UnrollSteps)
	}
	if len(win.Inputs) != B*win.T || len(win.Targets) != B*win.T {
		return fmt.Errorf("window of %d×%d has %d inputs and %d targets", win.T, B, len(win.Inputs), len(win.Targets))
	}
	if win.Reset != nil && len(win.Reset) != B {
		return fmt.Errorf("window has %d reset flags for %d streams", len(win.Reset), B)
	}
	for i, tok := range win.Inputs {
		if tok < 0 || tok >= V {
			return fmt.Errorf("window input at step %d, stream %d is token %d, outside the vocabulary 0..%d", i/B, i%B, tok, V-1)
		}
	}
	for i, tok := range win.Targets {
		if tok >= V {
			return fmt.Errorf("window target at step %d, stream %d is token %d, outside the vocabulary 0..%d", i/B, i%B, tok, V-1)
		}
	}
	return nil
}

// Step trains on one window: forward, loss, backward, clipping, one
// optimizer update, and the carried state moves on. A window without any
// counted target makes no update (StepInfo.Tokens is 0) but still carries
// the state. Bad windows return an error and change nothing.
func (tr *Trainer[T]) Step(ctx context.Context, win Window) (StepInfo, error) {
	if err := ctx.Err(); err != nil {
		return StepInfo{}, err
	}
	if err := tr.checkWindow(win); err != nil {
		return StepInfo{}, err
	}
	w, B := tr.w, tr.cfg.BatchSize
	inputs, targets, steps := win.Inputs, win.Targets, win.T
	anyReset := false
	for _, r := range win.Reset {
		anyReset = anyReset || r
	}
	if tr.advance > 0 {
		if anyReset {
			// Replay is per window, not per stream: a reset in any stream
			// drops the replay of all streams for this update and restarts
			// from the state after the last real tokens.
			tr.restoreEnd()
			tr.histK = 0
		}
		K := tr.histK
		copy(tr.in, tr.hist[:K*B])
		copy(tr.in[K*B:], win.Inputs)
		for i := range K * B {
			tr.tg[i] = -1
		}
		copy(tr.tg[K*B:], win.Targets)
		steps = K + win.T
		inputs, targets = tr.in[:steps*B], tr.tg[:steps*B]
	}
	if anyReset {
		w.resetStreams(win.Reset)
	}
	t0 := tr.times.start()
	w.drawMasks(tr.rng, steps)
	tr.times.lap(PhaseInput, t0)
	w.forward(tr.pool, inputs, steps, true)
	t0 = tr.times.start()
	total, count := w.loss(targets)
	t0 = tr.times.lap(PhaseOutput, t0)
	info := StepInfo{Step: tr.step, Tokens: count, LearningRate: tr.sched.Rate(tr.step)}
	if count > 0 {
		info.Loss = total / float64(count)
		tr.m.ZeroGrad()
		w.backward(tr.pool)
		t0 = tr.times.lap(PhaseBackward, t0)
		info.GradNorm = tr.clip.clipNorm(tr.pool, tr.cfg.ClipNorm)
		if !finite(info.Loss) || !finite(info.GradNorm) {
			return info, fmt.Errorf("step %d: %w (loss %v, gradient norm %v)", tr.step+1, ErrNonFinite, info.Loss, info.GradNorm)
		}
		tr.clip.clipValue(tr.pool, tr.cfg.ClipValue)
		tr.opt.Step(info.LearningRate)
		tr.step++
		tr.tokens += int64(count)
		info.Step = tr.step
	}
	if tr.advance > 0 {
		tr.saveEnd(steps)
		k := min(tr.keep, steps)
		copy(tr.hist, inputs[(steps-k)*B:steps*B])
		tr.histK = k
		w.carry(steps - k)
	} else {
		w.carry(steps)
	}
	tr.times.lap(PhaseUpdate, t0)
	return info, nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func (tr *Trainer[T]) saveEnd(steps int) {
	n := tr.cfg.BatchSize * tr.m.cfg.HiddenSize
	for l := range tr.w.layers {
		lw := &tr.w.layers[l]
		copy(tr.endH[l], lw.h[steps*n:(steps+1)*n])
		if tr.endC != nil {
			copy(tr.endC[l], lw.c[steps*n:(steps+1)*n])
		}
	}
}

func (tr *Trainer[T]) restoreEnd() {
	for l := range tr.w.layers {
		lw := &tr.w.layers[l]
		copy(lw.h, tr.endH[l])
		if tr.endC != nil {
			copy(lw.c, tr.endC[l])
		}
	}
}

// Run trains on windows from batches until they end (io.EOF, which
// returns nil), the training.max_steps budget is reached (nil), ctx is
// cancelled (ctx.Err()) or Step or onStep fails (that error). onStep, which
// may be nil, is called after every update with its StepInfo; this is where
// a caller reports progress or saves checkpoints.
func (tr *Trainer[T]) Run(ctx context.Context, batches Batches, onStep func(context.Context, StepInfo) error) error {
	for {
		if tr.cfg.MaxSteps > 0 && tr.step >= int64(tr.cfg.MaxSteps) {
			return nil
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		win, err := batches.Next(ctx)
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
		info, err := tr.Step(ctx, win)
		if err != nil {
			return err
		}
		if onStep != nil && info.Tokens > 0 {
			if err := onStep(ctx, info); err != nil {
				return err
			}
		}
	}
}

// TrainerState is the scalar part of a trainer's state, JSON-able. With
// the tensors of StateTensors and the model's Params it is everything an
// exact resume needs.
type TrainerState struct {
	Step      int64          `json:"step"`   // updates made
	Tokens    int64          `json:"tokens"` // positions trained on
	RNG       []byte         `json:"rng"`    // dropout generator (math/rand/v2 PCG, MarshalBinary)
	Optimizer OptimizerState `json:"optimizer"`
	Schedule  ScheduleState  `json:"schedule"`
	// History holds the BPTT(h; h′) replay tokens, time-major, a multiple
	// of the batch size; empty otherwise.
	History []int `json:"history,omitempty"`
}

// State returns the trainer's scalar state.
func (tr *Trainer[T]) State() TrainerState {
	rng, _ := tr.pcg.MarshalBinary() // never fails
	st := TrainerState{Step: tr.step, Tokens: tr.tokens, RNG: rng, Optimizer: tr.opt.State(), Schedule: tr.sched.State()}
	if tr.advance > 0 {
		st.History = append([]int(nil), tr.hist[:tr.histK*tr.cfg.BatchSize]...)
	}
	return st
}

// StateTensors lists live views of the trainer's tensor state: the
// optimizer's slots ("optim.<slot>.<parameter>") and the carried hidden
// state of every layer ("state.layer.L.h" and, for LSTM, "state.layer.L.c",
// each batch_size×hidden_size; with BPTT(h; h′) also "…h_end" and "…c_end",
// the state after the last real token). To resume, copy saved values into
// these views and the model's Params, then call SetState.
func (tr *Trainer[T]) StateTensors() []Tensor[T] { return tr.stateTensors }

// SetState restores a state returned by State (after the tensors were
// copied in). It checks the state before changing anything.
func (tr *Trainer[T]) SetState(st TrainerState) error {
	if st.Step < 0 || st.Tokens < 0 {
		return fmt.Errorf("trainer state: negative step %d or token count %d", st.Step, st.Tokens)
	}
	pcg := rand.NewPCG(0, 0)
	if err := pcg.UnmarshalBinary(st.RNG); err != nil {
		return fmt.Errorf("trainer state: generator: %w", err)
	}
	B := tr.cfg.BatchSize
	if len(st.History)%B != 0 || len(st.History) > len(tr.hist) {
		return fmt.Errorf("trainer state: %d replay tokens, want a multiple of %d up to %d", len(st.History), B, len(tr.hist))
	}
	for _, tok := range st.History {
		if tok < 0 || tok >= tr.m.vocab {
			return fmt.Errorf("trainer state: replay token %d outside the vocabulary", tok)
		}
	}
	if err := tr.opt.SetState(st.Optimizer); err != nil {
		return fmt.Errorf("trainer state: %w", err)
	}
	if err := tr.sched.SetState(st.Schedule); err != nil {
		return fmt.Errorf("trainer state: %w", err)
	}
	*tr.pcg = *pcg
	tr.step, tr.tokens = st.Step, st.Tokens
	if tr.advance > 0 {
		copy(tr.hist, st.History)
		tr.histK = len(st.History) / B
	}
	return nil
}

// ResetState zeroes the carried state of every stream (and drops any
// BPTT(h; h′) replay), as at the start of a new pass over the data.
func (tr *Trainer[T]) ResetState() {
	tr.w.resetAll()
	tr.histK = 0
	for l := range tr.endH {
		clear(tr.endH[l])
	}
	for l := range tr.endC {
		clear(tr.endC[l])
	}
}
