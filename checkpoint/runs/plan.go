package runs

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"time"

	"weft/configs"
	"weft/data"
)

// PlanFile records the deadline plan of a run whose "cosine" or "linear"
// schedule anneals to a time budget (see Plan).
const PlanFile = "plan.json"

// Plan returns the path of the deadline plan.
func (l Layout) Plan() string { return l.File(PlanFile) }

// How a deadline becomes a planned step count. The session times the
// run's own first windows: it lets planSkipWindows windows pass untimed
// (the first ones allocate buffers and warm the caches), then times the
// next planTimedWindows, or more until planTimedFraction of the time left
// has passed, up to planTimedMax (so that a long night is planned from a
// minute of training, not from a moment the load may not last). From the measured seconds per step it plans
//
//	steps = ⌊((deadline − now)·(1 − PlanMargin) − v) / (s + o)⌋
//
// more steps, where s is the measured time of one step, v the estimated
// time of one validation (the final one) and o the validation time spread
// over the steps (v / evaluation.every_steps, plus v per epoch). A
// validation reads the split forward only, about a third of the work of
// training on as many tokens (forward and backward: common practice), so
// v = validation tokens / (3 · measured training tokens per second). The
// margin keeps the schedule's end before the deadline when the machine
// slows down; the deadline still stops the run if it does not.
const (
	planSkipWindows   = 2
	planTimedWindows  = 12
	planTimedFraction = 0.01
	planTimedMax      = time.Minute
	// PlanMargin is the fraction of the time left that the plan leaves
	// unused (the sizing rule counts on the same margin).
	PlanMargin = configs.PlanMargin
)

// provisionalDecaySteps is the schedule length while the speed is
// measured: long enough that the first windows train at the schedule's
// start (the warm-up, then learning_rate; the cosine factor is exactly 1
// there in float64, the linear one within 1e-8).
const provisionalDecaySteps = 1 << 30

var planHeader = data.FileHeader{Format: "weft-plan", Version: 1}

// Plan is how a run turned its deadline into a step count; the schedule
// depends on PlannedSteps alone from then on, so a killed and resumed run
// ends as a straight one does. The planned step is also recorded in every
// checkpoint's progress; this file keeps the measurement behind it.
type Plan struct {
	data.FileHeader
	Schedule     string    `json:"schedule"`      // "cosine" or "linear"
	PlannedSteps int64     `json:"planned_steps"` // the step the schedule reaches its floor and the run ends
	MadeAtStep   int64     `json:"made_at_step"`  // the step the plan was made at
	MadeAt       time.Time `json:"made_at"`
	Deadline     time.Time `json:"deadline"`
	// The measurement: windows timed, seconds per training step, training
	// tokens per second, and the estimated validation overhead per step.
	TimedWindows             int     `json:"timed_windows"`
	SecondsPerStep           float64 `json:"seconds_per_step"`
	TokensPerSecond          float64 `json:"tokens_per_second"`
	ValidationSecondsPerStep float64 `json:"validation_seconds_per_step"`
	ValidationSeconds        float64 `json:"validation_seconds"`
	Margin                   float64 `json:"margin"`
	// Replans counts the --replan measurements, CatchUps the plans made
	// again because the run fell behind (see keepUp); PreviousSteps is
	// the planned step before the last one.
	Replans       int   `json:"replans,omitempty"`
	CatchUps      int   `json:"catch_ups,omitempty"`
	PreviousSteps int64 `json:"previous_planned_steps,omitempty"`
}

// PlanSteps is the planning rule: the step a run at step now should end
// at to finish left before its deadline with the margin kept, given the
// measured seconds per step, the validation overhead per step and the
// time of the final validation (see PlanMargin). It is at least step+1.
func PlanSteps(step int64, left time.Duration, secPerStep, overheadPerStep, finalSeconds, margin float64) int64 {
	avail := left.Seconds()*(1-margin) - finalSeconds
	per := secPerStep + overheadPerStep
	if !(per > 0) || !(avail > 0) {
		return step + 1
	}
	n := math.Floor(avail / per)
	if n < 1 {
		n = 1
	}
	if n > 1e15 {
		n = 1e15
	}
	return step + int64(n)
}

// ReadPlan reads a run directory's deadline plan; a run without one gives
// an error wrapping os.ErrNotExist.
func ReadPlan(dir string) (Plan, error) {
	path := Layout(dir).Plan()
	var p Plan
	b, err := os.ReadFile(path)
	if err != nil {
		return p, fmt.Errorf("plan: %w", err)
	}
	if err := json.Unmarshal(b, &p); err != nil {
		return p, fmt.Errorf("plan %s: %w", path, err)
	}
	if p.Format != planHeader.Format || p.Version < 1 || p.Version > planHeader.Version {
		return p, fmt.Errorf("plan %s: format %q version %d, want %q version 1 to %d", path, p.Format, p.Version, planHeader.Format, planHeader.Version)
	}
	return p, nil
}

func (d *Dir) writePlan(p Plan) error {
	p.FileHeader = planHeader
	return writeJSON(d.Plan(), p)
}
