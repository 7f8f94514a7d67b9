package rnn

import (
	"fmt"
	"math"
)

// Schedule gives the learning rate of every step, as training.schedule
// says (see TrainConfig):
//
//	constant:  η_t = η₀
//	step:      η_t = η₀ · γ^⌊t/s⌋                   γ = decay_factor, s = decay_every_steps
//	cosine:    η_t = η₀ · (t+1)/w                   for t < w = warmup_steps
//	           η_t = η_min + (η₀−η_min)(1+cos(π p))/2,  p = min(1, (t−w)/(S−w)), S = cosine_steps
//	linear:    η_t = η₀ · (t+1)/w                   for t < w = warmup_steps
//	           η_t = η_min + (η₀−η_min)(1−p),       p = min(1, (t−w)/(S−w)), S = linear_steps
//	plateau:   η_t = η₀ / d^k                       d = plateau_divisor, k = divisions so far
//
// where t counts updates from 0 (the cosine form follows Loshchilov &
// Hutter 2017, SGDR, without restarts; the linear one is the common-practice
// straight-line decay). At t = S both give η_min exactly. The plateau schedule divides when
// ReportValidation sees more than plateau_patience validations in a row
// that do not improve on the best by the relative plateau_threshold.
type Schedule struct {
	cfg   TrainConfig
	state ScheduleState
}

// ScheduleState is the schedule's mutable state, JSON-able: only the
// plateau schedule has any.
type ScheduleState struct {
	Divisions int     `json:"divisions"`       // times the rate was divided
	Best      float64 `json:"best"`            // best validation loss, valid when HaveBest
	HaveBest  bool    `json:"have_best"`       // a validation loss was reported
	Bad       int     `json:"bad_validations"` // validations in a row without improvement
	// Scale multiplies every rate the schedule gives (a caller lowers it
	// after a divergence, say). Zero means 1, so that states saved before
	// the field existed still load.
	Scale float64 `json:"scale,omitempty"`
}

// NewSchedule returns the schedule of a validated cfg.
func NewSchedule(cfg TrainConfig) (*Schedule, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	return &Schedule{cfg: cfg}, nil
}

// Rate is the learning rate of update t (counting from 0), times the
// scale set by SetScale.
func (s *Schedule) Rate(t int64) float64 {
	if s.state.Scale != 0 {
		return s.state.Scale * s.rate(t)
	}
	return s.rate(t)
}

// SetScale sets the factor every rate is multiplied by (1 initially); it
// must be positive.
func (s *Schedule) SetScale(f float64) error {
	if !(f > 0) || math.IsInf(f, 0) {
		return fmt.Errorf("learning-rate scale must be a positive number, got %v", f)
	}
	s.state.Scale = f
	return nil
}

// Scale is the factor set by SetScale.
func (s *Schedule) Scale() float64 {
	if s.state.Scale == 0 {
		return 1
	}
	return s.state.Scale
}

func (s *Schedule) rate(t int64) float64 {
	c := s.cfg
	lr := c.LearningRate
	switch c.Schedule {
	case "step":
		return lr * math.Pow(c.DecayFactor, float64(t/int64(c.DecayEverySteps)))
	case "cosine", "linear":
		w, total := int64(c.WarmupSteps), int64(c.DecaySteps())
		if t < w {
			return lr * float64(t+1) / float64(w)
		}
		p := math.Min(1, float64(t-w)/float64(total-w))
		if p == 1 {
			return c.MinLearningRate
		}
		if c.Schedule == "linear" {
			return c.MinLearningRate + (lr-c.MinLearningRate)*(1-p)
		}
		return c.MinLearningRate + (lr-c.MinLearningRate)*(1+math.Cos(math.Pi*p))/2
	case "plateau":
		return lr / math.Pow(c.PlateauDivisor, float64(s.state.Divisions))
	}
	return lr
}

// ReportValidation tells the schedule a validation loss (any unit, lower is
// better) and reports whether the plateau schedule divided the rate. Other
// schedules only record the best loss.
func (s *Schedule) ReportValidation(loss float64) bool {
	st := &s.state
	if !st.HaveBest || loss < st.Best*(1-s.cfg.PlateauThreshold) {
		if !st.HaveBest || loss < st.Best {
			st.Best = loss
		}
		st.HaveBest = true
		st.Bad = 0
		return false
	}
	if loss < st.Best {
		st.Best = loss
	}
	st.Bad++
	if s.cfg.Schedule != "plateau" || st.Bad <= s.cfg.PlateauPatience {
		return false
	}
	st.Divisions++
	st.Bad = 0
	return true
}

// State returns a copy of the schedule's state.
func (s *Schedule) State() ScheduleState { return s.state }

// SetState restores a state returned by State.
func (s *Schedule) SetState(st ScheduleState) error {
	if st.Divisions < 0 || st.Bad < 0 || math.IsNaN(st.Best) || st.Scale < 0 || math.IsNaN(st.Scale) || math.IsInf(st.Scale, 0) {
		return fmt.Errorf("schedule state out of range: %+v", st)
	}
	s.state = st
	return nil
}
