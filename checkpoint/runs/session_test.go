package runs

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/modeltest"
	"weft/configs"
	"weft/data/corpustest"
	"weft/rnn"
)

// testCorpus is about 12 KB of dispatch-desk words in lines of 3 to 11,
// drawn by a seeded generator.
func testCorpus() string {
	return corpustest.WordLines(strings.Fields("berth tug cargo salt timber coal pilot inbound outbound confirm harbour lots over"), 7, 11, 12000)
}

// tinyRun writes the test corpus into dir and returns a run of a tiny LSTM
// (H = 16) on it: validation every 10 steps, a checkpoint every 10, three
// kept.
func tinyRun(t testing.TB, dir string) *configs.Run {
	t.Helper()
	corpus := filepath.Join(dir, "corpus.txt")
	if err := os.WriteFile(corpus, []byte(testCorpus()), 0o644); err != nil {
		t.Fatal(err)
	}
	r := configs.Default()
	r.Data.Files = []string{corpus}
	r.Data.Tokenizer = "char"
	r.Model.HiddenSize, r.Model.EmbeddingSize = 16, 8
	r.Training.BatchSize, r.Training.UnrollSteps = 4, 16
	r.Training.Seed, r.Training.Threads = 5, 1
	r.Evaluation.EverySteps = 10
	r.Checkpoint.EverySteps, r.Checkpoint.EveryMinutes, r.Checkpoint.KeepLast = 10, 0, 3
	r.Output.MetricsEverySteps = 5
	return &r
}

// recorder is an Observer that keeps what it hears.
type recorder struct {
	mu          sync.Mutex
	starts      []Start
	validations []Validation
	notices     []Notice
	steps       int
}

func (r *recorder) Started(s Start) { r.mu.Lock(); r.starts = append(r.starts, s); r.mu.Unlock() }
func (r *recorder) Progress(Status) { r.mu.Lock(); r.steps++; r.mu.Unlock() }
func (r *recorder) Validated(v Validation) {
	r.mu.Lock()
	r.validations = append(r.validations, v)
	r.mu.Unlock()
}
func (r *recorder) Notice(n Notice) { r.mu.Lock(); r.notices = append(r.notices, n); r.mu.Unlock() }

func (r *recorder) warnings() string {
	var b strings.Builder
	for _, n := range r.notices {
		if n.Warning {
			b.WriteString(n.Text + "\n")
		}
	}
	return b.String()
}

// fixedClock never moves, so that wall-clock fields are equal between runs.
func fixedClock() time.Time { return time.Date(2026, 12, 4, 22, 0, 0, 0, time.UTC) }

// train runs Train with the fixed clock and a recorder, up to steps.
func train(t testing.TB, ctx context.Context, r *configs.Run, dir string, steps int, o TrainOptions) (*Result, *recorder, error) {
	t.Helper()
	c := *r
	c.Training.MaxSteps = steps
	rec := &recorder{}
	o.Observer = rec
	if o.Now == nil {
		o.Now = fixedClock
	}
	res, err := Train(ctx, &c, dir, o)
	return res, rec, err
}

// TestCancelAndResumeExact stops a run by cancelling its context at step
// 13, resumes it, and checks that it ends with the same state as a run
// that was never stopped (common practice for exact resume: the same
// weights, optimizer moments and data position).
func TestCancelAndResumeExact(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	straight := filepath.Join(dir, "straight")
	if _, _, err := train(t, context.Background(), r, straight, 30, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	split := filepath.Join(dir, "split")
	ctx, cancel := context.WithCancel(context.Background())
	res, _, err := train(t, ctx, r, split, 30, TrainOptions{AfterStep: func(step int64, _ *rnn.Model[float32]) {
		if step == 13 {
			cancel()
		}
	}})
	if err != nil {
		t.Fatal(err)
	}
	if !res.Interrupted || res.Steps != 13 || res.Reason != "interrupted" {
		t.Fatalf("cancelled run: got interrupted %v at step %d (%q), want interrupted at 13", res.Interrupted, res.Steps, res.Reason)
	}
	if want := checkpoint.StepPath(Layout(split).Checkpoints(), 13); res.LatestPath != want {
		t.Errorf("latest checkpoint %s, want %s", res.LatestPath, want)
	}
	res, rec, err := train(t, context.Background(), r, split, 30, TrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if res.Steps != 30 || res.ResumedFrom == "" || len(rec.starts) != 1 || rec.starts[0].Step != 13 {
		t.Fatalf("resumed run: steps %d from %q, started at %+v", res.Steps, res.ResumedFrom, rec.starts)
	}
	for _, name := range []string{checkpoint.StepName(30), checkpoint.BestName} {
		modeltest.SameTrainingState(t, filepath.Join(Layout(split).Checkpoints(), name), filepath.Join(Layout(straight).Checkpoints(), name))
	}
	// The metrics logs agree too, line for line, but for the line of step
	// 15, whose mean training loss covers only the windows trained after
	// the resume (steps 14 and 15), and the wall clock.
	a, err := ReadMetrics(Layout(split).Metrics())
	if err != nil {
		t.Fatal(err)
	}
	b, err := ReadMetrics(Layout(straight).Metrics())
	if err != nil {
		t.Fatal(err)
	}
	if len(a) != len(b) || len(a) != 6 {
		t.Fatalf("metrics: %d lines after the resume, %d straight; want 6 (every 5 steps)", len(a), len(b))
	}
	for i := range a {
		if a[i].Step != b[i].Step {
			t.Fatalf("metrics line %d: step %d, straight %d", i, a[i].Step, b[i].Step)
		}
		if a[i].Step != 15 && *a[i].TrainLoss != *b[i].TrainLoss {
			t.Errorf("metrics line %d: step %d loss %v, straight step %d loss %v", i, a[i].Step, *a[i].TrainLoss, b[i].Step, *b[i].TrainLoss)
		}
	}
}

// TestNothingToDo: a finished run resumed with the same budget trains no
// step and says so.
func TestNothingToDo(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if _, _, err := train(t, context.Background(), r, run, 10, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	res, rec, err := train(t, context.Background(), r, run, 10, TrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !res.NothingToDo || res.Steps != 10 || rec.steps != 0 {
		t.Errorf("got nothing-to-do %v at step %d after %d steps, want true at 10 after 0", res.NothingToDo, res.Steps, rec.steps)
	}
}

// TestDivergenceRecovers poisons a weight with NaN after step 13: step 14
// gives a non-finite loss, the guard restores step 10 (the last save) with
// half the learning rate, and the run reaches its budget.
func TestDivergenceRecovers(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.EverySteps = 0
	run := filepath.Join(dir, "run")
	done := false
	res, rec, err := train(t, context.Background(), r, run, 30, TrainOptions{AfterStep: func(step int64, net *rnn.Model[float32]) {
		if step == 13 && !done {
			done = true
			net.Params()[1].Value[0] = float32(math.NaN())
		}
	}})
	if err != nil {
		t.Fatal(err)
	}
	if res.Steps != 30 {
		t.Errorf("got %d steps, want 30", res.Steps)
	}
	w := rec.warnings()
	if !strings.Contains(w, "step 14: non-finite loss or gradient") || !strings.Contains(w, "restored step 10 and lowered the learning rate to 0.001 (try 1 of 3)") {
		t.Errorf("warnings lack the recovery:\n%s", w)
	}
	f, err := checkpoint.Load(checkpoint.StepPath(Layout(run).Checkpoints(), 30))
	if err != nil {
		t.Fatal(err)
	}
	p, err := checkpoint.ReadProgress(f)
	if err != nil {
		t.Fatal(err)
	}
	if p.LearningRateScale != 0.5 || p.DivergencesTotal != 1 || p.Divergences != 0 {
		t.Errorf("progress: scale %v, divergences %d in all and %d in a row; want 0.5, 1, 0", p.LearningRateScale, p.DivergencesTotal, p.Divergences)
	}
}

// TestDivergenceGivesUp: a learning rate of 1e30 diverges at every try; the
// guard lowers it twice (training.divergence_retries = 2) and gives up
// with ErrGaveUp.
func TestDivergenceGivesUp(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Training.Optimizer, r.Training.LearningRate, r.Training.ClipNorm, r.Training.DivergenceRetries = "sgd", 1e30, 0, 2
	_, rec, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 50, TrainOptions{})
	if !errors.Is(err, ErrGaveUp) || !strings.Contains(err.Error(), "did not recover in 2 tries") {
		t.Fatalf("got %v, want an ErrGaveUp error naming the 2 tries", err)
	}
	w := rec.warnings()
	for _, want := range []string{"lowered the learning rate to 5e+29 (try 1 of 2)", "lowered the learning rate to 2.5e+29 (try 2 of 2)"} {
		if !strings.Contains(w, want) {
			t.Errorf("warnings lack %q:\n%s", want, w)
		}
	}
}

// TestEarlyStopping spoils the model after every step from step 2 on (a
// growing output bias towards one token), so that validation never
// improves on step 1; with patience 2 the run stops after the validations
// of steps 2 and 3.
func TestEarlyStopping(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.EverySteps, r.Training.EarlyStopPatience = 1, 2
	res, rec, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 50, TrainOptions{AfterStep: func(step int64, net *rnn.Model[float32]) {
		if step < 2 {
			return
		}
		for _, p := range net.Params() {
			if p.Name == "output.bias" {
				p.Value[0] += 5
			}
		}
	}})
	if err != nil {
		t.Fatal(err)
	}
	if res.Steps != 3 || !strings.HasPrefix(res.Reason, "early stopping: no validation improvement in 2 evaluations") {
		t.Errorf("got %d steps (%q), want an early stop at step 3", res.Steps, res.Reason)
	}
	if res.BestStep != 1 || len(rec.validations) != 3 || rec.validations[0].Improved == false || rec.validations[2].Improved {
		t.Errorf("best at step %d after validations %+v; want the best at step 1", res.BestStep, rec.validations)
	}
}

// TestRetention keeps the newest keep_last periodic checkpoints and the
// best copy.
func TestRetention(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Checkpoint.EverySteps, r.Checkpoint.KeepLast = 5, 2
	run := filepath.Join(dir, "run")
	if _, _, err := train(t, context.Background(), r, run, 30, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	ents, err := os.ReadDir(Layout(run).Checkpoints())
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, e := range ents {
		got = append(got, e.Name())
	}
	want := []string{checkpoint.BestName, checkpoint.StepName(25), checkpoint.StepName(30)}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("checkpoints %v, want %v", got, want)
	}
}

// TestResumeRefusals: a changed model key, a changed corpus and a damaged
// newest checkpoint.
func TestResumeRefusals(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if _, _, err := train(t, context.Background(), r, run, 20, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	t.Run("changed model key", func(t *testing.T) {
		c := *r
		c.Model.HiddenSize = 32
		_, _, err := train(t, context.Background(), &c, run, 30, TrainOptions{})
		if err == nil || !strings.Contains(err.Error(), "differs from the one this run was trained with in model.hidden_size") {
			t.Errorf("got %v, want a refusal naming model.hidden_size", err)
		}
	})
	t.Run("safe keys may change", func(t *testing.T) {
		for _, k := range []string{"training.max_steps", "training.threads", "evaluation.every_steps", "checkpoint.keep_last", "output.plots"} {
			if !SafeOnResume(k, r) {
				t.Errorf("%s: not safe on resume", k)
			}
		}
		if SafeOnResume("training.learning_rate", r) {
			t.Error("training.learning_rate: safe on resume")
		}
	})
	t.Run("changed corpus", func(t *testing.T) {
		if err := os.WriteFile(r.Data.Files[0], []byte(testCorpus()+"zebra quay\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		defer os.WriteFile(r.Data.Files[0], []byte(testCorpus()), 0o644)
		_, _, err := train(t, context.Background(), r, run, 30, TrainOptions{})
		if err == nil || !strings.Contains(err.Error(), "vocabulary prepared from the corpus differs") {
			t.Errorf("got %v, want a refusal of the changed vocabulary", err)
		}
	})
	t.Run("damaged newest checkpoint", func(t *testing.T) {
		p := checkpoint.StepPath(Layout(run).Checkpoints(), 20)
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		b[len(b)/2] ^= 0xff
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		res, rec, err := train(t, context.Background(), r, run, 25, TrainOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(rec.warnings(), "skipped a damaged checkpoint") || rec.starts[0].Step != 10 || res.Steps != 25 {
			t.Errorf("resumed from step %d to %d with warnings %q; want step 10 to 25 and the damage reported", rec.starts[0].Step, res.Steps, rec.warnings())
		}
	})
	t.Run("locked", func(t *testing.T) {
		d, err := Open(run)
		if err != nil {
			t.Fatal(err)
		}
		defer d.Close()
		_, _, err = train(t, context.Background(), r, run, 30, TrainOptions{})
		if !errors.Is(err, ErrLocked) || !strings.Contains(err.Error(), "is in use by pid") {
			t.Errorf("got %v, want ErrLocked naming the holder", err)
		}
	})
}

// failingSave fails with ENOSPC for the paths fail accepts.
func failingSave(fail func(path string) bool) func(string, *checkpoint.File) error {
	return func(path string, f *checkpoint.File) error {
		if fail(path) {
			return fmt.Errorf("save checkpoint %q: disk full: write temporary file: %w", path, syscall.ENOSPC)
		}
		return checkpoint.Save(path, f)
	}
}

// TestSaveFailures applies checkpoint.on_save_error to a full disk at the
// periodic save of step 10, and checks that a failed final save stops the
// run with the cause still wrapped.
func TestSaveFailures(t *testing.T) {
	step10 := func(p string) bool { return filepath.Base(p) == checkpoint.StepName(10) }
	t.Run("continue", func(t *testing.T) {
		dir := t.TempDir()
		r := tinyRun(t, dir)
		res, rec, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 20, TrainOptions{Save: failingSave(step10)})
		if err != nil {
			t.Fatal(err)
		}
		if res.Steps != 20 || !strings.Contains(rec.warnings(), "training goes on (checkpoint.on_save_error = \"continue\")") {
			t.Errorf("got %d steps, warnings %q; want 20 and the failure reported", res.Steps, rec.warnings())
		}
	})
	t.Run("stop", func(t *testing.T) {
		dir := t.TempDir()
		r := tinyRun(t, dir)
		r.Checkpoint.OnSaveError = "stop"
		_, _, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 20, TrainOptions{Save: failingSave(step10)})
		if !errors.Is(err, syscall.ENOSPC) || !strings.Contains(err.Error(), "the previous checkpoints are untouched") {
			t.Errorf("got %v, want an ENOSPC error", err)
		}
	})
	t.Run("final", func(t *testing.T) {
		dir := t.TempDir()
		r := tinyRun(t, dir)
		final := func(p string) bool { return filepath.Base(p) == checkpoint.StepName(15) }
		_, _, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 15, TrainOptions{Save: failingSave(final)})
		if !errors.Is(err, syscall.ENOSPC) {
			t.Errorf("got %v, want the final save's ENOSPC", err)
		}
		// The periodic checkpoint of step 10 is intact and resumable.
		if _, err := checkpoint.Load(checkpoint.StepPath(Layout(filepath.Join(dir, "run")).Checkpoints(), 10)); err != nil {
			t.Errorf("the step-10 checkpoint: %v", err)
		}
	})
}

// TestTimeBudget: with a clock that advances a second per step, --for 10s
// stops after about 10 steps, saying so.
func TestTimeBudget(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	now := fixedClock()
	clock := func() time.Time { return now }
	res, _, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 0, TrainOptions{
		Now: clock, Duration: 10 * time.Second,
		AfterStep: func(int64, *rnn.Model[float32]) { now = now.Add(time.Second) },
	})
	if err != nil {
		t.Fatal(err)
	}
	if res.Reason != timeBudgetReached || res.Steps != 10 {
		t.Errorf("got %q at step %d, want the time budget at step 10", res.Reason, res.Steps)
	}
}

// TestStdinCorpus trains on a corpus given as a reader ("-" in
// data.files), as a Go program embedding the package would.
func TestStdinCorpus(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Data.Files = []string{"-"}
	res, _, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 5, TrainOptions{Stdin: strings.NewReader(testCorpus())})
	if err != nil || res.Steps != 5 {
		t.Fatalf("got %v at step %v", err, res)
	}
}

// TestFailedFreshRunLeavesNothing: issue 12, a fresh run that fails before
// its first checkpoint (here an empty corpus) leaves no run file, no empty
// checkpoints folder and no directory it created.
func TestFailedFreshRunLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	if err := os.WriteFile(r.Data.Files[0], nil, 0o644); err != nil {
		t.Fatal(err)
	}
	run := filepath.Join(dir, "run")
	if _, _, err := train(t, context.Background(), r, run, 10, TrainOptions{}); err == nil {
		t.Fatal("an empty corpus trained")
	}
	if _, err := os.Stat(run); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("the run directory is still there (%v)", err)
	}
	// In a directory that existed, the files it held stay.
	if err := os.Mkdir(run, 0o755); err != nil {
		t.Fatal(err)
	}
	keep := filepath.Join(run, "notes.txt")
	if err := os.WriteFile(keep, []byte("mine"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, _, err := train(t, context.Background(), r, run, 10, TrainOptions{}); err == nil {
		t.Fatal("an empty corpus trained")
	}
	ents, _ := os.ReadDir(run)
	if len(ents) != 1 || ents[0].Name() != "notes.txt" {
		t.Errorf("left %v, want only notes.txt", ents)
	}
}

// TestValidationDenominator: with the symbols tokenizer, whose whitespace
// between symbols belongs to no token, validation divides by the
// characters the tokens cover, as eval.Compare does (issue 11's one
// denominator), not by every character of the split.
func TestValidationDenominator(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Data.Tokenizer = "symbols"
	r.Evaluation.EverySteps = 1
	run := filepath.Join(dir, "run")
	_, rec, err := train(t, context.Background(), r, run, 1, TrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	d, err := Open(run)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	ds, err := Prepare(context.Background(), r, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	v := rec.validations[0]
	counted, all := ds.Validation.CountedCharacters(), ds.Validation.Characters
	if counted >= all {
		t.Fatalf("counted %d of %d characters: the corpus has no whitespace between symbols", counted, all)
	}
	bits := v.CrossEntropy * float64(ds.Validation.Tokens.Len()) / math.Ln2
	if got, want := v.BitsPerChar, bits/float64(counted); math.Abs(got-want) > 1e-12*want {
		t.Errorf("validation bits per character %v, want %v (bits over the %d counted characters, not the %d of the split)", got, want, counted, all)
	}
}

// TestValidationEveryMinutes: with evaluation.every_minutes, validation
// follows the clock (a minute a step here), not the step count.
func TestValidationEveryMinutes(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.EverySteps, r.Evaluation.EveryMinutes = 0, 4
	now := fixedClock()
	_, rec, err := train(t, context.Background(), r, filepath.Join(dir, "run"), 10, TrainOptions{
		Now:       func() time.Time { return now },
		AfterStep: func(int64, *rnn.Model[float32]) { now = now.Add(time.Minute) },
	})
	if err != nil {
		t.Fatal(err)
	}
	var steps []int64
	for _, v := range rec.validations {
		steps = append(steps, v.Step)
	}
	// Steps 4 and 8 by the clock, then step 10 at the end of the run.
	if want := []int64{4, 8, 10}; !reflect.DeepEqual(steps, want) {
		t.Errorf("validated at steps %v, want %v", steps, want)
	}
}

// TestDamagedCacheSaid: a run whose token cache was damaged between two
// invocations rebuilds it from the corpus, says so in one warning, and
// resumes with the same state as a run that was never damaged.
func TestDamagedCacheSaid(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	straight, damaged := filepath.Join(dir, "straight"), filepath.Join(dir, "damaged")
	want, _, err := train(t, context.Background(), r, straight, 20, TrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if _, _, err := train(t, context.Background(), r, damaged, 10, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	cache := Layout(damaged).TokenCache()
	b, err := os.ReadFile(cache)
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)/2] ^= 0xff // one flipped byte: the checksum no longer matches
	if err := os.WriteFile(cache, b, 0o644); err != nil {
		t.Fatal(err)
	}
	got, rec, err := train(t, context.Background(), r, damaged, 20, TrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var said []string
	for _, n := range rec.notices {
		if strings.Contains(n.Text, "token cache was damaged and has been rebuilt") {
			said = append(said, n.Text)
		}
	}
	if len(said) != 1 || strings.Contains(said[0], "\n") {
		t.Errorf("notices %q: want one line saying the cache was rebuilt", noticeText(rec))
	}
	modeltest.SameTrainingState(t, got.LatestPath, want.LatestPath)
}
