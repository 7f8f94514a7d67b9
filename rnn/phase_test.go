package rnn

import (
	"context"
	"testing"
	"time"
)

// TestPhaseTimes checks the timing hook: with it on, training gives the
// same bits as without, every phase gets some time, the phases add up to
// at most the time spent in Step (they do not overlap), and a window still
// allocates nothing.
func TestPhaseTimes(t *testing.T) {
	cfgs := smallConfigs()
	gb := cfgs["gru"]
	gb.GRUForm = "reset_before"
	cfgs["gru-reset-before"] = gb
	ctx := context.Background()
	for name, cfg := range cfgs {
		t.Run(name, func(t *testing.T) {
			tc := DefaultTrainConfig()
			tc.BatchSize, tc.UnrollSteps = 4, 8
			tokens := randomTokens(4000, 12, 3)
			var params [2][]float32
			for run, timed := range []bool{false, true} {
				m, _ := NewModel[float32](cfg, 12, 1)
				tr, err := NewTrainer(m, tc, nil)
				if err != nil {
					t.Fatal(err)
				}
				var pt PhaseTimes
				if timed {
					tr.SetPhaseTimes(&pt)
				}
				b := &streamBatches{tokens: tokens, B: tc.BatchSize, T: tc.UnrollSteps}
				var inStep time.Duration
				for range 3 {
					w, _ := b.Next(ctx)
					t0 := time.Now()
					if _, err := tr.Step(ctx, w); err != nil {
						t.Fatal(err)
					}
					inStep += time.Since(t0)
				}
				params[run] = append([]float32(nil), m.values...)
				if !timed {
					continue
				}
				for p := range NumPhases {
					if pt[p] <= 0 {
						t.Errorf("phase %s: got %v, want a positive time", p, pt[p])
					}
				}
				if got := pt.Total(); got > inStep {
					t.Errorf("phases sum to %v, more than the %v spent in Step", got, inStep)
				}
				w, _ := b.Next(ctx)
				if allocs := testing.AllocsPerRun(3, func() { tr.Step(ctx, w) }); allocs != 0 {
					t.Errorf("Trainer.Step with phase timing: %v allocations per window, want 0", allocs)
				}
			}
			if k := sameBits(params[0], params[1]); k >= 0 {
				t.Errorf("parameter %d with timing on: %v, off %v", k, params[1][k], params[0][k])
			}
		})
	}
}
