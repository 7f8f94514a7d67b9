package runs

import (
	"context"
	"math"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/modeltest"
	"weft/configs"
	"weft/rnn"
)

// stepClock is a clock that moves one second per training step (the
// session's AfterStep seam advances it), so that a run's measured speed,
// and so its plan, is the same on any machine and under any load.
type stepClock struct {
	mu  sync.Mutex
	now time.Time
}

func newStepClock() *stepClock { return &stepClock{now: fixedClock()} }

func (c *stepClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.now }
func (c *stepClock) tick()          { c.mu.Lock(); c.now = c.now.Add(time.Second); c.mu.Unlock() }

// deadlineRun is tinyRun annealing to its deadline: schedule sched, no
// step budget, floor 1e-4.
func deadlineRun(t *testing.T, dir, sched string) *configs.Run {
	r := tinyRun(t, dir)
	r.Training.Schedule = sched
	r.Training.MinLearningRate = 1e-4
	r.Training.MaxSteps = 0
	return r
}

// trainFor runs Train with the step clock and a time budget of d.
func trainFor(t *testing.T, ctx context.Context, r *configs.Run, dir string, c *stepClock, d time.Duration, o TrainOptions) (*Result, *recorder) {
	t.Helper()
	rec := &recorder{}
	o.Observer, o.Now, o.Duration = rec, c.Now, d
	after := o.AfterStep
	o.AfterStep = func(step int64, m *rnn.Model[float32]) {
		c.tick()
		if after != nil {
			after(step, m)
		}
	}
	res, err := Train(ctx, r, dir, o)
	if err != nil {
		t.Fatal(err)
	}
	return res, rec
}

// TestDeadlineScheduleEndsAtPlan: a run with a time budget and an
// annealing schedule measures its speed, plans its end before the
// deadline, ends at the planned step, and its rate there is the floor.
func TestDeadlineScheduleEndsAtPlan(t *testing.T) {
	for _, sched := range []string{"cosine", "linear"} {
		t.Run(sched, func(t *testing.T) {
			dir := t.TempDir()
			r := deadlineRun(t, dir, sched)
			c := newStepClock()
			start := c.Now()
			const budget = 120 * time.Second
			res, rec := trainFor(t, context.Background(), r, filepath.Join(dir, "run"), c, budget, TrainOptions{})
			if !strings.HasPrefix(res.Reason, "planned end reached") {
				t.Fatalf("reason %q, want the planned end", res.Reason)
			}
			if res.PlannedSteps == 0 || res.Steps != res.PlannedSteps {
				t.Fatalf("ended at step %d, planned %d", res.Steps, res.PlannedSteps)
			}
			// The clock moves 1 s a step, so the plan made after 2 + 12
			// windows has about (120 − 14) · (1 − margin) s, less the
			// validation estimate, at 1 step/s: between 50 and 14 + 95
			// steps; the run ends before the deadline.
			if res.PlannedSteps < 50 || res.PlannedSteps > 14+95 {
				t.Errorf("planned %d steps, want 50 to 109", res.PlannedSteps)
			}
			if end := c.Now(); end.After(start.Add(budget)) {
				t.Errorf("ended at %v, after the deadline %v", end, start.Add(budget))
			}
			p, err := ReadPlan(filepath.Join(dir, "run"))
			if err != nil {
				t.Fatal(err)
			}
			if p.PlannedSteps != res.PlannedSteps || p.MadeAtStep != planSkipWindows+planTimedWindows || p.TimedWindows != planTimedWindows ||
				math.Abs(p.SecondsPerStep-1) > 1e-9 || p.Schedule != sched || p.Margin != PlanMargin {
				t.Errorf("plan file %+v does not match the run (planned %d, 1 s/step)", p, res.PlannedSteps)
			}
			f, err := checkpoint.Load(res.LatestPath)
			if err != nil {
				t.Fatal(err)
			}
			prog, err := checkpoint.ReadProgress(f)
			if err != nil {
				t.Fatal(err)
			}
			if prog.PlannedSteps != res.PlannedSteps {
				t.Errorf("checkpoint progress planned %d, want %d", prog.PlannedSteps, res.PlannedSteps)
			}
			// The last validation, at the planned step, reports the rate
			// of that step: the floor.
			last := rec.validations[len(rec.validations)-1]
			if last.Step != res.Steps || last.LearningRate != r.Training.MinLearningRate {
				t.Errorf("last validation at step %d with rate %v, want step %d at the floor %v", last.Step, last.LearningRate, res.Steps, r.Training.MinLearningRate)
			}
			if !strings.Contains(noticeText(rec), "deadline plan:") {
				t.Errorf("no notice of the plan in %q", noticeText(rec))
			}
		})
	}
}

func noticeText(r *recorder) string {
	var b strings.Builder
	for _, n := range r.notices {
		b.WriteString(n.Text + "\n")
	}
	return b.String()
}

// TestDeadlineKilledResumedExact: a deadline run stopped after its plan
// and resumed keeps the plan and ends with the same weights, optimizer
// state and data position as the straight run (exact resume: common
// practice), though the resumed invocation has a deadline of its own.
func TestDeadlineKilledResumedExact(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "cosine")
	straight, split := filepath.Join(dir, "straight"), filepath.Join(dir, "split")
	want, _ := trainFor(t, context.Background(), r, straight, newStepClock(), 120*time.Second, TrainOptions{})

	c := newStepClock()
	ctx, cancel := context.WithCancel(context.Background())
	res, _ := trainFor(t, ctx, r, split, c, 120*time.Second, TrainOptions{AfterStep: func(step int64, _ *rnn.Model[float32]) {
		if step == 33 {
			cancel()
		}
	}})
	if !res.Interrupted || res.Steps != 33 || res.PlannedSteps != want.PlannedSteps {
		t.Fatalf("stopped run: interrupted %v at %d, planned %d; want interrupted at 33, planned %d", res.Interrupted, res.Steps, res.PlannedSteps, want.PlannedSteps)
	}
	got, _ := trainFor(t, context.Background(), r, split, c, 120*time.Second, TrainOptions{})
	if got.Steps != want.Steps || got.PlannedSteps != want.PlannedSteps || got.Reason != want.Reason {
		t.Fatalf("resumed run ended at %d (planned %d, %q), straight at %d (planned %d, %q)",
			got.Steps, got.PlannedSteps, got.Reason, want.Steps, want.PlannedSteps, want.Reason)
	}
	modeltest.SameTrainingState(t, got.LatestPath, want.LatestPath)
}

// TestDeadlineReplan: --replan on a resumed run measures again and plans
// from the new time left; without it the plan stays.
func TestDeadlineReplan(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "linear")
	run := filepath.Join(dir, "run")
	c := newStepClock()
	ctx, cancel := context.WithCancel(context.Background())
	first, _ := trainFor(t, ctx, r, run, c, 120*time.Second, TrainOptions{AfterStep: func(step int64, _ *rnn.Model[float32]) {
		if step == 20 {
			cancel()
		}
	}})
	res, rec := trainFor(t, context.Background(), r, run, c, 300*time.Second, TrainOptions{Replan: true})
	if res.PlannedSteps <= first.PlannedSteps || res.Steps != res.PlannedSteps {
		t.Fatalf("replanned with 300 s left at step 20: planned %d, ended %d; first plan %d", res.PlannedSteps, res.Steps, first.PlannedSteps)
	}
	if !strings.Contains(noticeText(rec), "replanned") || !strings.Contains(noticeText(rec), "was ") {
		t.Errorf("no replan notice in %q", noticeText(rec))
	}
	p, err := ReadPlan(run)
	if err != nil {
		t.Fatal(err)
	}
	if p.Replans != 1 || p.PreviousSteps != first.PlannedSteps || p.PlannedSteps != res.PlannedSteps {
		t.Errorf("plan file: %d replans, previous %d, planned %d; want 1, %d, %d", p.Replans, p.PreviousSteps, p.PlannedSteps, first.PlannedSteps, res.PlannedSteps)
	}
}

// TestDeadlineCatchUp: a deadline run whose steps take three times as
// long after its plan was made (the machine got busy) falls behind, plans
// again from the time left, and still ends at its (new) planned step at
// the floor rate before the deadline, where the first plan would have
// been cut off by the deadline far from it.
func TestDeadlineCatchUp(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "cosine")
	run := filepath.Join(dir, "run")
	c := newStepClock()
	start := c.Now()
	const budget = 120 * time.Second
	res, rec := trainFor(t, context.Background(), r, run, c, budget, TrainOptions{AfterStep: func(step int64, _ *rnn.Model[float32]) {
		if step > 40 {
			c.tick() // 3 s a step from here on
			c.tick()
		}
	}})
	if !strings.HasPrefix(res.Reason, "planned end reached") || res.Steps != res.PlannedSteps {
		t.Fatalf("ended at step %d (planned %d): %q; want the planned end", res.Steps, res.PlannedSteps, res.Reason)
	}
	if end := c.Now(); end.After(start.Add(budget)) {
		t.Errorf("ended at %v, after the deadline %v", end.Sub(start), budget)
	}
	p, err := ReadPlan(run)
	if err != nil {
		t.Fatal(err)
	}
	// The first plan (50 to 109 steps at 1 s a step, as in
	// TestDeadlineScheduleEndsAtPlan; 83 here) could not be kept: at 3 s
	// a step from step 40 the 80 s left hold at most 26 more, so the new
	// plan lies between step 41 and 66.
	if p.CatchUps < 1 || p.PreviousSteps <= p.PlannedSteps || p.PlannedSteps != res.PlannedSteps || p.PreviousSteps < 67 || p.PlannedSteps < 41 || p.PlannedSteps > 66 {
		t.Errorf("plan file: %d catch-ups, planned %d, previously %d; want at least one, to a step from 41 to 66 from one past 66", p.CatchUps, p.PlannedSteps, p.PreviousSteps)
	}
	last := rec.validations[len(rec.validations)-1]
	if last.Step != res.Steps || last.LearningRate != r.Training.MinLearningRate {
		t.Errorf("last validation at step %d with rate %v, want step %d at the floor %v", last.Step, last.LearningRate, res.Steps, r.Training.MinLearningRate)
	}
	if !strings.Contains(noticeText(rec), "behind the deadline plan") {
		t.Errorf("no notice of the catch-up in %q", noticeText(rec))
	}
	// The checkpoint saved at the catch-up and the last one record the new
	// plan, so that a resumed run keeps it.
	f, err := checkpoint.Load(res.LatestPath)
	if err != nil {
		t.Fatal(err)
	}
	if prog, err := checkpoint.ReadProgress(f); err != nil || prog.PlannedSteps != res.PlannedSteps {
		t.Errorf("checkpoint progress planned %d (%v), want %d", prog.PlannedSteps, err, res.PlannedSteps)
	}
}

// TestDeadlineSlowSaveNoCatchUp: a periodic save that takes 20 s (a
// large model on a slow disk) makes the stretch that holds it slow, but
// the run is not behind: the plan (200 steps at 1 s a step, with the
// margin of a 300 s budget and an estimate for validations that take no
// time on this clock) has room for it. The catch-up counts saves and
// validations as an overhead spread over all steps, so it leaves the plan
// alone and the run ends at the step it first planned. Timed with the
// save inside it, the stretch (at least 12 steps and a tenth of the time
// left, about 20 s here) would look twice as slow, and the run would be
// planned again.
func TestDeadlineSlowSaveNoCatchUp(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "cosine")
	r.Checkpoint.EverySteps = 100
	run := filepath.Join(dir, "run")
	c := newStepClock()
	start := c.Now()
	const budget = 300 * time.Second
	var slow int
	res, rec := trainFor(t, context.Background(), r, run, c, budget, TrainOptions{Save: func(path string, f *checkpoint.File) error {
		if strings.HasPrefix(filepath.Base(path), "step-") && !strings.HasSuffix(path, "0200.safetensors") { // the periodic save at step 100 (not the final one at the plan's end)
			slow++
			for range 20 {
				c.tick()
			}
		}
		return checkpoint.Save(path, f)
	}})
	p, err := ReadPlan(run)
	if err != nil {
		t.Fatal(err)
	}
	if slow == 0 {
		t.Fatal("no slow save: the test tests nothing")
	}
	if p.CatchUps != 0 || strings.Contains(noticeText(rec), "behind the deadline plan") {
		t.Errorf("planned again %d times (%q); the saves fit in the margin", p.CatchUps, noticeText(rec))
	}
	if !strings.HasPrefix(res.Reason, "planned end reached") || res.Steps != p.PlannedSteps || p.MadeAtStep != planSkipWindows+planTimedWindows {
		t.Errorf("ended at step %d (%q), plan %+v; want the first plan's end", res.Steps, res.Reason, p)
	}
	if end := c.Now(); end.After(start.Add(budget)) {
		t.Errorf("ended %v after the start, after the budget %v", end.Sub(start), budget)
	}
}

// TestAnnealingNeedsALength: an annealing schedule with no length, no
// step budget and no time budget is refused, naming the keys.
func TestAnnealingNeedsALength(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "cosine")
	_, err := Train(context.Background(), r, filepath.Join(dir, "run"), TrainOptions{Now: fixedClock})
	if err == nil || !strings.Contains(err.Error(), "training.cosine_steps, training.max_steps or a time budget") {
		t.Fatalf("got %v, want the missing length named", err)
	}
}

// TestProportionWarning: a run whose deadline lets it pass over its corpus
// many more times than overfitEpochs warns with the numbers.
func TestProportionWarning(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Training.MaxSteps = 80
	// Timed for the first minute (planTimedMax), then 64 tokens a step at
	// 1 step/s for 10 days: thousands of passes over
	// the 11,000-odd training tokens.
	_, rec := trainFor(t, context.Background(), r, filepath.Join(dir, "run"), newStepClock(), 240*time.Hour, TrainOptions{})
	if w := rec.warnings(); !strings.Contains(w, "out of proportion") || !strings.Contains(w, "times in the") {
		t.Errorf("warnings %q, want the many passes named", w)
	}
}

// TestDeadlineTooShortToPlan: a budget that ends before the speed is
// measured (5 s at 1 s a step, 14 windows needed) stops at the deadline
// with a warning that the schedule did not anneal, and no plan.
func TestDeadlineTooShortToPlan(t *testing.T) {
	dir := t.TempDir()
	r := deadlineRun(t, dir, "cosine")
	res, rec := trainFor(t, context.Background(), r, filepath.Join(dir, "run"), newStepClock(), 5*time.Second, TrainOptions{})
	if res.Reason != timeBudgetReached || res.PlannedSteps != 0 || res.Steps != 5 {
		t.Errorf("got %q at step %d, planned %d; want the time budget at step 5, no plan", res.Reason, res.Steps, res.PlannedSteps)
	}
	if !strings.Contains(rec.warnings(), "did not anneal") {
		t.Errorf("warnings %q, want the missing plan named", rec.warnings())
	}
}
