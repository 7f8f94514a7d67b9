package rnn

import (
	"errors"
	"math"
	"strings"
	"testing"
)

// TestAnnealingSchedules checks the "linear" schedule and the length rules
// of both annealing schedules against values worked out by hand from the
// formulas in Schedule's doc comment.
func TestAnnealingSchedules(t *testing.T) {
	base := DefaultTrainConfig()
	base.LearningRate, base.MinLearningRate = 1, 0.1
	type point struct {
		t    int64
		want float64
	}
	tests := []struct {
		name   string
		set    func(*TrainConfig)
		points []point
	}{
		// Warm-up (t+1)/w over w = 4, then 0.1 + 0.9(1−p) with
		// p = (t−4)/(24−4): p = 0.25 at t = 9 gives 0.775, p = 0.5 at
		// t = 14 gives 0.55, and the floor 0.1 from t = 24 on.
		{"linear", func(c *TrainConfig) { c.Schedule, c.WarmupSteps, c.LinearSteps = "linear", 4, 24 },
			[]point{{0, 0.25}, {3, 1}, {4, 1}, {9, 0.775}, {14, 0.55}, {23, 0.1 + 0.9/20}, {24, 0.1}, {1000, 0.1}}},
		// Without linear_steps the length is max_steps.
		{"linear/max_steps", func(c *TrainConfig) { c.Schedule, c.MaxSteps = "linear", 10 },
			[]point{{0, 1}, {5, 0.55}, {10, 0.1}}},
		// A plan sets the length: WithDecaySteps(20) on cosine; p = 0.5
		// at t = 10 gives 0.1 + 0.9·(1+cos(π/2))/2 = 0.55.
		{"cosine/planned", func(c *TrainConfig) { c.Schedule = "cosine"; *c = c.WithDecaySteps(20) },
			[]point{{0, 1}, {10, 0.55}, {20, 0.1}, {21, 0.1}}},
		// The cosine's own key wins over max_steps.
		{"cosine/own key", func(c *TrainConfig) { c.Schedule, c.CosineSteps, c.MaxSteps = "cosine", 20, 1000 },
			[]point{{10, 0.55}, {20, 0.1}}},
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
			// At the end of the length the rate is the floor exactly.
			if end := int64(c.DecaySteps()); s.Rate(end) != c.MinLearningRate || !(s.Rate(end-1) > c.MinLearningRate) {
				t.Errorf("Rate(%d) = %v, Rate(%d) = %v; want the floor %v exactly at the end and above it before", end, s.Rate(end), end-1, s.Rate(end-1), c.MinLearningRate)
			}
		})
	}
}

// TestAnnealingNeedsLength: with no length key and no max_steps, Validate
// returns ErrNoDecayLength (a run file passes it on to the run, which
// plans the length from its deadline); the warm-up must fit the length.
func TestAnnealingNeedsLength(t *testing.T) {
	for _, sched := range []string{"cosine", "linear"} {
		c := DefaultTrainConfig()
		c.Schedule = sched
		err := c.Validate()
		if !errors.Is(err, ErrNoDecayLength) || !strings.Contains(err.Error(), "training."+sched+"_steps") {
			t.Errorf("%s without a length: got %v, want ErrNoDecayLength naming training.%s_steps", sched, err, sched)
		}
		c = c.WithDecaySteps(10)
		c.WarmupSteps = 10
		if err := c.Validate(); err == nil || errors.Is(err, ErrNoDecayLength) {
			t.Errorf("%s with warm-up 10 of length 10: got %v, want a warm-up error", sched, err)
		}
		if !c.Anneals() || !c.OwnDecaySteps() {
			t.Errorf("%s: Anneals %v, OwnDecaySteps %v after WithDecaySteps; want both", sched, c.Anneals(), c.OwnDecaySteps())
		}
	}
	if c := DefaultTrainConfig(); c.Anneals() || c.DecaySteps() != 0 || math.IsNaN(c.LearningRate) {
		t.Errorf("constant schedule: Anneals %v, DecaySteps %d; want false, 0", c.Anneals(), c.DecaySteps())
	}
}
