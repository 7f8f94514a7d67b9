package rnn

import "time"

// Phase is one part of a training step, as PhaseTimes splits its time.
type Phase int

// The phases of Trainer.Step, in the order a step runs them.
const (
	// PhaseInput: dropout masks, the embedding gather, the input
	// projection of every step (one matrix product per layer) and its bias.
	PhaseInput Phase = iota
	// PhaseRecurrence: the per-step recurrent matrix products of the
	// forward pass.
	PhaseRecurrence
	// PhaseGates: the rest of the cells' forward pass, the elementwise
	// gate and state arithmetic.
	PhaseGates
	// PhaseOutput: the projection, the output layer's product and bias,
	// and the softmax with the cross-entropy and its gradient.
	PhaseOutput
	// PhaseBackward: clearing the gradients and the whole backward pass.
	PhaseBackward
	// PhaseUpdate: gradient clipping, the optimizer step and moving the
	// carried state on.
	PhaseUpdate

	// NumPhases is the number of phases.
	NumPhases
)

var phaseNames = [NumPhases]string{"input", "recurrence", "gates", "output", "backward", "update"}

// String is the phase's short name: "input", "recurrence", "gates",
// "output", "backward" or "update".
func (p Phase) String() string {
	if p < 0 || p >= NumPhases {
		return "phase(?)"
	}
	return phaseNames[p]
}

// PhaseTimes accumulates wall-clock time per phase of Trainer.Step (see
// Trainer.SetPhaseTimes). The phases do not overlap, so their sum is at
// most the time spent in Step; what is left is checking the window.
type PhaseTimes [NumPhases]time.Duration

// Total is the sum over all phases.
func (pt *PhaseTimes) Total() time.Duration {
	var s time.Duration
	for _, d := range pt {
		s += d
	}
	return s
}

// start returns the current time, or the zero time when pt is nil (timing
// off: no clock read).
func (pt *PhaseTimes) start() time.Time {
	if pt == nil {
		return time.Time{}
	}
	return time.Now()
}

// lap adds the time since t0 to phase p and returns the current time, the
// start of the next phase; with pt nil it does nothing.
func (pt *PhaseTimes) lap(p Phase, t0 time.Time) time.Time {
	if pt == nil {
		return time.Time{}
	}
	now := time.Now()
	pt[p] += now.Sub(t0)
	return now
}

// SetPhaseTimes makes every later Step add its time per phase to pt; nil
// (the default) turns timing off, which then costs a nil check per phase.
// Timing reads the clock a few times per layer and step of the window and
// allocates nothing.
func (tr *Trainer[T]) SetPhaseTimes(pt *PhaseTimes) {
	tr.times = pt
	tr.w.times = pt
	for l := range tr.w.layers {
		tr.w.layers[l].times = pt
	}
}

// get is the time phase p has so far, 0 with pt nil.
func (pt *PhaseTimes) get(p Phase) time.Duration {
	if pt == nil {
		return 0
	}
	return pt[p]
}

// lapGates ends a cell's forward pass begun at t0: the cell timed its
// recurrent products itself (PhaseRecurrence grew from recBefore), the rest
// of the time since t0 goes to PhaseGates.
func (pt *PhaseTimes) lapGates(t0 time.Time, recBefore time.Duration) time.Time {
	if pt == nil {
		return time.Time{}
	}
	now := time.Now()
	pt[PhaseGates] += now.Sub(t0) - (pt[PhaseRecurrence] - recBefore)
	return now
}
