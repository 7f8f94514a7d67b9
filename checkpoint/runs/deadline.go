package runs

import (
	"fmt"
	"time"

	"weft/checkpoint"
	"weft/configs"
	"weft/rnn"
)

// measurement is the timing of the run's first windows (see PlanSkipWindows).
type measurement struct {
	from    int64 // the step the invocation started at
	started bool  // the untimed windows are behind
	t0      time.Time
	step0   int64
	tokens0 int64
	off0    time.Duration // the session's offTime at t0 (keepUp)
}

// decidePlan sets how the schedule's length is known: from the run file,
// from the plan recorded in the checkpoint, or from a plan made once the
// speed is measured. It refuses an annealing schedule with no length and
// no time budget.
func (s *session) decidePlan() error {
	tc := s.r.Training.TrainConfig
	if !tc.Anneals() || tc.OwnDecaySteps() {
		if s.o.Replan {
			s.warn("--replan: this run does not anneal to its deadline (training.schedule = %q with its length set); nothing to replan", tc.Schedule)
		}
		return nil
	}
	switch {
	case s.prog.PlannedSteps > 0:
		s.decaySteps = s.prog.PlannedSteps
		if s.o.Replan {
			if s.deadline.IsZero() {
				return fmt.Errorf("--replan needs a time budget (--for, --until or training.max_duration) to plan against")
			}
			s.replanning = true
		}
	case tc.MaxSteps > 0:
		// The length is max_steps.
	case !s.deadline.IsZero():
		s.decaySteps, s.planning = provisionalDecaySteps, true
	default:
		return fmt.Errorf("training.schedule %q needs training.%s_steps, training.max_steps or a time budget (--for, --until, training.max_duration) to anneal to",
			tc.Schedule, tc.Schedule)
	}
	return nil
}

// measure times the first windows of the invocation; when enough are
// timed it warns about a plan out of proportion and, for a run annealing
// to its deadline, makes (or remakes) the plan.
func (s *session) measure() error {
	m := s.meas
	step := s.tr.Steps()
	if !m.started {
		if step-m.from >= planSkipWindows {
			m.started, m.t0, m.step0, m.tokens0, m.off0 = true, s.o.Now(), step, s.tokens, s.offTime
		}
		return nil
	}
	if step-m.step0 < planTimedWindows || s.o.Now().Sub(m.t0) < min(planTimedMax, time.Duration(planTimedFraction*float64(s.deadline.Sub(m.t0)))) {
		return nil
	}
	s.meas = nil
	el := (s.o.Now().Sub(m.t0) - (s.offTime - m.off0)).Seconds() // validations and saves apart: the plan adds its estimate of them
	if el <= 0 {
		el = 1e-9 // a clock that did not move: as fast as can be
	}
	n := step - m.step0
	secPerStep := el / float64(n)
	tokPerSec := float64(s.tokens-m.tokens0) / el
	return s.plan(int(n), secPerStep, tokPerSec)
}

// plan turns the measured speed into the planned step (see PlanMargin),
// warns when the budget is out of proportion to the model and corpus, and
// for an annealing run records the plan and rebuilds the trainer with it.
func (s *session) plan(timed int, secPerStep, tokPerSec float64) error {
	now := s.o.Now()
	step := s.tr.Steps()
	left := s.deadline.Sub(now)
	tokPerStep := tokPerSec * secPerStep
	over, valSec := s.validationCost(tokPerSec, tokPerStep)
	planned := PlanSteps(step, left, secPerStep, over, valSec, PlanMargin)

	// Out of proportion: judged on the tokens this invocation will train.
	expect := float64(planned-step) * tokPerStep
	for _, w := range configs.CheckProportion(int64(expect), int64(s.ds.Train.Tokens.Len()), int64(s.net.NumParams()), left) {
		s.warn("%s", w)
	}
	if !s.planning && !s.replanning {
		return nil
	}
	tc := s.r.Training.TrainConfig
	if w := int64(tc.WarmupSteps); planned <= w {
		s.warn("the deadline leaves time for about %d steps, no more than training.warmup_steps = %d: the schedule is planned to end at step %d, which the deadline may cut short", planned, w, w+1)
		planned = w + 1
	}
	old := s.prog.PlannedSteps
	p := Plan{Schedule: tc.Schedule, PlannedSteps: planned, MadeAtStep: step, MadeAt: now, Deadline: s.deadline,
		TimedWindows: timed, SecondsPerStep: secPerStep, TokensPerSecond: tokPerSec,
		ValidationSecondsPerStep: over, ValidationSeconds: valSec, Margin: PlanMargin}
	if prev, err := ReadPlan(s.d.Path()); err == nil && s.replanning {
		p.Replans, p.PreviousSteps, p.CatchUps = prev.Replans+1, old, prev.CatchUps
	}
	if err := s.adopt(p); err != nil {
		return err
	}
	end := now.Add(time.Duration(float64(planned-step) * (secPerStep + over) * float64(time.Second)))
	if s.replanning {
		s.replanning = false
		change := "unchanged"
		if planned != old {
			change = fmt.Sprintf("moved by %+d steps", planned-old)
		}
		s.info("replanned from %.0f tokens/s measured over %d windows: the %s schedule now ends at step %d (was %d, %s), about %s, before the deadline %s",
			tokPerSec, timed, tc.Schedule, planned, old, change, end.Format("15:04:05"), s.deadline.Format("15:04:05"))
		return nil
	}
	s.planning = false
	s.info("deadline plan: %.0f tokens/s measured over %d windows; the %s schedule reaches its floor and the run ends at step %d, about %s, keeping %.0f%% of the time left as margin before the deadline %s",
		tokPerSec, timed, tc.Schedule, planned, end.Format("15:04:05"), PlanMargin*100, s.deadline.Format("15:04:05"))
	return nil
}

// validationCost estimates the time of one validation at tokPerSec
// training tokens a second (see PlanSteps) and that time spread over the
// steps of tokPerStep tokens: one every evaluation.every_steps and one per
// epoch.
func (s *session) validationCost(tokPerSec, tokPerStep float64) (perStep, one float64) {
	valTokens := scoredTokens(s.ds.Validation.Tokens.Len(), s.r.Evaluation.HeldOutTokens) // what a validation scores
	one = float64(valTokens) / (3 * tokPerSec)
	if every := s.r.Evaluation.EverySteps; every > 0 {
		perStep += one / float64(every)
	}
	if train := float64(s.ds.Train.Tokens.Len()); tokPerStep > 0 && train > 0 {
		perStep += one / (train / tokPerStep) // one validation per epoch
	}
	return perStep, one
}

// adopt makes p the run's plan: the schedule's length from now on, in the
// progress the next checkpoint records and in the plan file.
func (s *session) adopt(p Plan) error {
	s.prog.PlannedSteps, s.decaySteps = p.PlannedSteps, p.PlannedSteps
	f, err := s.file()
	if err != nil {
		return err
	}
	tr, err := rnn.NewTrainer(s.net, s.trainConfig(s.prog.LearningRateScale), s.pool)
	if err != nil {
		return err
	}
	if err := checkpoint.RestoreTrainer(f, tr); err != nil {
		return fmt.Errorf("deadline plan: %w", err)
	}
	s.tr = tr
	if err := s.d.writePlan(p); err != nil {
		s.warn("%s", oneLine(err.Error()))
	}
	return nil
}

// keepUp checks, stretch by stretch, that a run annealing to its deadline
// still reaches its planned step before the deadline, and plans again
// when it does not (the machine slowed down after the plan was made: other
// work started, the clock of a shared core fell). A stretch is at least
// planTimedWindows steps and at least a tenth of the time left (at most
// planTimedMax). Its time per step counts training alone: the time spent
// validating and saving (offTime) is left out of it and counted instead
// as an overhead per step averaged over every step since the first check
// of this invocation, or the plan's estimate of it where that is larger,
// so that a stretch holding a validation does not look slow. When the
// planned step, at that speed and overhead, would come after the
// deadline, less the final validation, the run plans again from the time
// left with the margin kept, as it planned at its start (PlanSteps),
// records the new plan (CatchUps, PreviousSteps) and saves a checkpoint,
// so that a resumed run follows it. The plan only ever moves earlier
// here: the schedule jumps forward, its rate drops at once to where the
// shorter schedule has it, and from there it anneals to the floor at the
// new planned step. A run ahead of its plan keeps it and ends early
// (--replan on a resumed run plans the spare time too).
func (s *session) keepUp() error {
	if s.deadline.IsZero() || s.prog.PlannedSteps == 0 || s.decaySteps != s.prog.PlannedSteps || s.planning || s.replanning {
		return nil
	}
	now, step := s.o.Now(), s.tr.Steps()
	mark := &measurement{t0: now, step0: step, tokens0: s.tokens, off0: s.offTime}
	if s.stretch == nil {
		s.stretch, s.sincePlan = mark, mark
		return nil
	}
	m := s.stretch
	if step-m.step0 < planTimedWindows || now.Sub(m.t0) < min(planTimedMax, s.deadline.Sub(m.t0)/10) {
		return nil
	}
	s.stretch = mark
	n := step - m.step0
	train := now.Sub(m.t0) - (s.offTime - m.off0)
	if train <= 0 || n <= 0 {
		return nil
	}
	secPerStep := train.Seconds() / float64(n)
	tokPerSec := float64(s.tokens-m.tokens0) / train.Seconds()
	over, valSec := s.validationCost(tokPerSec, tokPerSec*secPerStep)
	if b := s.sincePlan; step > b.step0 {
		over = max(over, (s.offTime-b.off0).Seconds()/float64(step-b.step0))
	}
	old := s.prog.PlannedSteps
	end := now.Add(time.Duration((float64(old-step)*(secPerStep+over) + valSec) * float64(time.Second)))
	if !end.After(s.deadline) || old <= step+1 {
		return nil
	}
	planned := PlanSteps(step, s.deadline.Sub(now), secPerStep, over, valSec, PlanMargin)
	if planned >= old {
		return nil
	}
	tc := s.r.Training.TrainConfig
	if w := int64(tc.WarmupSteps); planned <= w {
		planned = min(w+1, old)
	}
	p := Plan{Schedule: tc.Schedule, PlannedSteps: planned, MadeAtStep: step, MadeAt: now, Deadline: s.deadline,
		TimedWindows: int(n), SecondsPerStep: secPerStep, TokensPerSecond: tokPerSec,
		ValidationSecondsPerStep: over, ValidationSeconds: valSec, Margin: PlanMargin, PreviousSteps: old, CatchUps: 1}
	if prev, err := ReadPlan(s.d.Path()); err == nil {
		p.Replans, p.CatchUps = prev.Replans, prev.CatchUps+1
	}
	if err := s.adopt(p); err != nil {
		return err
	}
	s.warn("behind the deadline plan: at %.0f tokens/s over the last %d windows (validations and saves apart) the %s schedule would end at step %d about %s, after the deadline %s; it now ends at step %d, about %s (its rate drops to where the shorter schedule has it)",
		tokPerSec, n, tc.Schedule, old, end.Format("15:04:05"), s.deadline.Format("15:04:05"), planned,
		now.Add(time.Duration((float64(planned-step)*(secPerStep+over)+valSec)*float64(time.Second))).Format("15:04:05"))
	if _, err := s.saveStep(false); err != nil {
		return err
	}
	return nil
}
