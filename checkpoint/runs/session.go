package runs

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"time"

	"weft/checkpoint"
	"weft/configs"
	"weft/data"
	"weft/data/atomicfile"
	"weft/eval"
	"weft/rnn"
	"weft/rnn/linalg"
)

// Divergence guard: the moving average of the training loss spans about
// lossAverageWindows windows, and spikes are judged only after
// lossWarmupWindows windows of it (until then against ln V).
const (
	lossAverageWindows = 50
	lossWarmupWindows  = 20
)

// ErrGaveUp is wrapped by Train's error when the divergence guard ran out
// of retries.
var ErrGaveUp = errors.New("training diverged")

// TrainOptions are the settings of one training invocation that are not
// part of the run file, and the session's dependencies.
type TrainOptions struct {
	// Duration is the time budget of this invocation (--for); 0 means none
	// (training.max_duration still applies).
	Duration time.Duration
	// Deadline is the wall-clock time to stop at; zero means none.
	Deadline time.Time
	// Restart moves the old checkpoints and metrics log aside and starts
	// over.
	Restart bool
	// Replan measures the speed again at the start of a resumed run that
	// anneals to its deadline and plans its end anew from the time left
	// (see PlanFile); without it a resumed run keeps its plan.
	Replan bool

	// Observer hears what the session does; nil hears nothing.
	Observer Observer
	// Now is the clock; nil means time.Now.
	Now func() time.Time
	// Save writes a checkpoint; nil means checkpoint.Save. Tests inject
	// failures (a full disk) here.
	Save func(path string, f *checkpoint.File) error
	// AfterStep, when non-nil, is called after every training step with
	// the model (tests poison weights or advance a fake clock here).
	AfterStep func(step int64, net *rnn.Model[float32])
	// Stdin is read when the run file's corpus is "-".
	Stdin io.Reader
}

// Result is what a training invocation reached.
type Result struct {
	BestPath   string // the best-validation checkpoint, "" when none
	LatestPath string // the newest checkpoint
	Steps      int64  // training steps in all (all invocations)
	Epochs     int    // completed epochs
	// BestValBitsPerChar is the best validation bits per character, NaN
	// when the run never validated; BestStep is its step.
	BestValBitsPerChar float64
	BestStep           int64
	// Interrupted says the context was cancelled and the run stopped after
	// saving its state.
	Interrupted bool
	// Reason says why the run ended: the budget reached, early stopping,
	// or "interrupted".
	Reason string
	// ResumedFrom is the checkpoint this invocation started from, "" for
	// a fresh start.
	ResumedFrom string
	// NothingToDo says a resumed run had already reached its budget.
	NothingToDo bool
	// PlannedSteps is the step a run annealing to its deadline planned to
	// end at (0: no plan); Deadline is this invocation's deadline (zero:
	// none) and Ended when it ended, so Deadline − Ended is the time to
	// spare (negative: late).
	PlannedSteps int64
	Deadline     time.Time
	Ended        time.Time
}

// session is one invocation of training on a run directory.
type session struct {
	r       *configs.Run
	o       TrainOptions
	obs     Observer
	ctx     context.Context // cancelled to stop: finish the window, save
	d       *Dir
	ckdir   string
	runTOML []byte
	ds      *data.Dataset
	vocabJS []byte

	net     *rnn.Model[float32]
	tr      *rnn.Trainer[float32]
	pool    *linalg.Pool
	batches *data.Batches
	prog    checkpoint.Progress

	lastGood     *checkpoint.File // the newest state known good, restored on divergence
	lastGoodPath string

	metrics *metricsLog

	start       time.Time // of this invocation
	loopStart   time.Time // of its training loop (the corpus prepared, the model built)
	deadline    time.Time // zero: none
	wallBase    float64   // WallSeconds of earlier invocations
	startStep   int64
	tokens      int64 // trained tokens in all
	startTokens int64

	lastSave       time.Time
	lastValidation time.Time // of this invocation, or its start
	lastSavedStep  int64
	valChars       int64        // characters of the validation tokens scored, the bits-per-character denominator
	valTokens      *data.Tokens // the validation tokens scored: the split, or its first evaluation.heldout_tokens

	// Since the last metrics line.
	winLoss   float64
	winTokens int64
	lastInfo  rnn.StepInfo
	val       *Validation // of the current step, for its metrics line

	// The deadline plan: decaySteps is the schedule length in force (the
	// plan, or provisionalDecaySteps while planning; 0: the run file's);
	// meas the speed measurement under way (nil: none); planning and
	// replanning say what the measurement is for; stretch the timing of
	// the steps since the last check that the plan is kept (keepUp).
	decaySteps int64
	meas       *measurement
	planning   bool
	replanning bool
	stretch    *measurement
	sincePlan  *measurement
	// offTime is the time this invocation spent validating and saving,
	// which keepUp leaves out of the training speed.
	offTime time.Duration

	res Result
}

// Train trains the run r in the run directory dir, creating it or resuming
// it from the newest intact checkpoint, until a budget, early stopping, the
// cancellation of ctx or an error; it saves the state at the end. A
// cancelled run is not an error: it finishes the current window, saves, and
// the result says Interrupted. A resumed run must use the same run file but
// for the keys SafeOnResume allows and the same vocabulary.
func Train(ctx context.Context, r *configs.Run, dir string, o TrainOptions) (*Result, error) {
	d, err := Open(dir)
	if err != nil {
		return nil, err
	}
	defer d.Close()
	r, err = absoluteFiles(r)
	if err != nil {
		return nil, err
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.Save == nil {
		o.Save = checkpoint.Save
	}
	s := &session{r: r, o: o, obs: o.Observer, ctx: ctx, d: d, ckdir: d.Checkpoints(), lastSavedStep: -1}
	if s.obs == nil {
		s.obs = nopObserver{}
	}
	_, statErr := os.Stat(d.RunFile())
	hadRunFile := statErr == nil
	ents, _ := checkpoint.List(s.ckdir)
	fresh := len(ents) == 0
	res, err := s.run()
	if s.ds != nil {
		s.ds.Close() // the mapped token cache
	}
	end := Outcome{Time: o.Now()}
	switch {
	case err != nil:
		end.State, end.Reason = StateFailed, errOutcome(err)
	case res.Interrupted:
		end.State, end.Reason, end.Step = StateInterrupted, res.Reason, res.Steps
	default:
		end.State, end.Reason, end.Step = StateFinished, res.Reason, res.Steps
	}
	if s.tr != nil && err != nil {
		end.Step = s.tr.Steps()
	}
	if err != nil && fresh && s.lastGoodPath == "" {
		// A fresh run that failed before its first checkpoint leaves no
		// run file and no empty checkpoints folder behind (a prepared
		// corpus cache stays: it is valid and saves the next attempt
		// the work).
		if !hadRunFile {
			os.Remove(d.RunFile())
		}
		os.Remove(s.ckdir)             // only when empty
		os.Remove(d.File(OutcomeFile)) // the training outcome of this invocation
		if d.created {
			d.Close()
			os.Remove(d.Path()) // only when empty, now that the lock is gone
		}
	}
	if s.metrics != nil {
		if cerr := s.metrics.Close(); err == nil && cerr != nil {
			err = cerr
		}
	}
	if s.pool != nil {
		s.pool.Close()
	}
	// The outcome of an invocation that trained; one refused before
	// training (a changed run file, say) leaves the previous one.
	if _, serr := os.Stat(d.Path()); serr == nil && s.tr != nil && (err == nil || !fresh || s.lastGoodPath != "") {
		d.writeOutcome(end)
	}
	return res, err
}

// absoluteFiles returns r with its corpus paths made absolute, so that the
// run file recorded in the checkpoints, and the check on resume, do not
// depend on the directory weft is started from.
func absoluteFiles(r *configs.Run) (*configs.Run, error) {
	c := *r
	c.Data.Files = append([]string(nil), r.Data.Files...)
	for i, f := range c.Data.Files {
		if f == "-" || filepath.IsAbs(f) {
			continue
		}
		abs, err := filepath.Abs(f)
		if err != nil {
			return nil, fmt.Errorf("data.files: %w", err)
		}
		c.Data.Files[i] = abs
	}
	return &c, nil
}

func (s *session) stopped() bool { return s.ctx.Err() != nil }

func (s *session) info(format string, args ...any) {
	s.obs.Notice(Notice{Text: fmt.Sprintf(format, args...)})
}

func (s *session) warn(format string, args ...any) {
	s.obs.Notice(Notice{Warning: true, Text: fmt.Sprintf(format, args...)})
}

func (s *session) run() (*Result, error) {
	r, d := s.r, s.d
	now := s.o.Now()
	s.start, s.lastSave, s.lastValidation = now, now, now
	if err := s.setDeadline(now); err != nil {
		return nil, err
	}
	if s.o.Restart {
		moved, err := d.MoveAside(now)
		if err != nil {
			return nil, err
		}
		for _, m := range moved {
			s.info("restart: moved %s", m)
		}
	}
	if err := os.MkdirAll(s.ckdir, 0o755); err != nil {
		return nil, fmt.Errorf("run directory %s: %w", d.Path(), unwrapPath(err))
	}
	if removed, err := atomicfile.CleanTemp(s.ckdir); err != nil {
		return nil, err
	} else if len(removed) > 0 {
		s.info("removed %d temporary file(s) left by an interrupted save", len(removed))
	}
	runTOML, err := configs.Encode(r)
	if err != nil {
		return nil, err
	}
	s.runTOML = runTOML

	// Resume from the newest intact checkpoint, if any.
	path, f, skipped, err := checkpoint.LoadNewestValid(s.ckdir)
	for _, e := range skipped {
		s.warn("skipped a damaged checkpoint: %s", oneLine(e.Error()))
	}
	switch {
	case errors.Is(err, checkpoint.ErrNoCheckpoint):
		f = nil
	case errors.Is(err, checkpoint.ErrCorrupt):
		return nil, fmt.Errorf("%w; move them aside with --restart to start over", err)
	case err != nil:
		return nil, err
	}
	if f != nil {
		if err := checkResume(f, path, runTOML, r); err != nil {
			return nil, err
		}
		if len(skipped) > 0 {
			s.warn("resuming from %s, the newest intact checkpoint", path)
		}
	}
	if _, err := d.WriteRunFile(r); err != nil {
		return nil, err
	}
	ds, err := Prepare(s.ctx, r, d, s.o.Stdin)
	if err != nil {
		return nil, err
	}
	s.ds = ds
	if ds.Cache.Damaged != nil {
		s.warn("%s", DamagedCache(ds.Cache.Damaged))
	}
	if s.vocabJS, err = ds.Vocab.MarshalJSON(); err != nil {
		return nil, err
	}
	if f != nil && !sameVocab(f, s.vocabJS) {
		return nil, fmt.Errorf("the vocabulary prepared from the corpus differs from the one in %s: the corpus changed since the run started; use another --run directory, or --restart to start over", path)
	}
	if err := s.build(f, path); err != nil {
		return nil, err
	}
	if s.metrics, err = openMetricsLog(d.Metrics(), s.tr.Steps()); err != nil {
		return nil, err
	}
	return s.train()
}

func (s *session) setDeadline(now time.Time) error {
	var ends []time.Time
	if s.o.Duration > 0 {
		ends = append(ends, now.Add(s.o.Duration))
	}
	if md := s.r.Training.MaxDuration; md != "" {
		d, err := time.ParseDuration(md)
		if err != nil {
			return fmt.Errorf("training.max_duration: %w", err)
		}
		ends = append(ends, now.Add(d))
	}
	if !s.o.Deadline.IsZero() {
		ends = append(ends, s.o.Deadline)
	}
	for _, e := range ends {
		if s.deadline.IsZero() || e.Before(s.deadline) {
			s.deadline = e
		}
	}
	return nil
}

// trainConfig is the trainer's config: the run's, with the learning rate
// scaled by the divergence guard's reductions.
func (s *session) trainConfig(scale float64) rnn.TrainConfig {
	tc := s.r.Training.TrainConfig
	if s.decaySteps > 0 {
		tc = tc.WithDecaySteps(int(s.decaySteps))
	}
	tc.LearningRate *= scale
	tc.MinLearningRate *= scale
	return tc
}

// build makes the model, trainer and batches, fresh or restored from f.
func (s *session) build(f *checkpoint.File, path string) error {
	r := s.r
	threads := r.Training.Threads
	if threads == 0 {
		threads = rnn.ChooseThreads(r.Model, r.Training.BatchSize, runtime.NumCPU())
	}
	s.pool = linalg.NewPool(threads)
	s.prog = checkpoint.Progress{LearningRateScale: 1, LastValidationStep: -1}
	if f != nil {
		p, err := checkpoint.ReadProgress(f)
		if err != nil {
			return fmt.Errorf("checkpoint %s: %w", path, err)
		}
		if !(p.LearningRateScale > 0) {
			return fmt.Errorf("checkpoint %s: learning-rate scale %v out of range", path, p.LearningRateScale)
		}
		s.prog = p
	}
	if err := s.decidePlan(); err != nil {
		return err
	}
	net, err := rnn.NewModelWithCounts[float32](r.Model, checkpoint.VocabCounts(s.ds.Vocab), r.Training.Seed)
	if err != nil {
		return err
	}
	net.SetPool(s.pool)
	s.net = net
	tr, err := rnn.NewTrainer(net, s.trainConfig(s.prog.LearningRateScale), s.pool)
	if err != nil {
		return err
	}
	s.tr = tr
	steps := r.Training.UnrollSteps
	if a := r.Training.BPTTAdvanceSteps; a > 0 {
		steps = a
	}
	b, err := data.NewBatches(s.ds.Train.Tokens, data.BatchOptions{
		Streams: r.Training.BatchSize, Steps: steps, Variation: r.Training.WindowVariation, Seed: r.Training.Seed})
	if err != nil {
		return err
	}
	s.batches = b
	if f != nil {
		if err := checkpoint.RestoreTrainer(f, tr); err != nil {
			return fmt.Errorf("resume from %s: %w", path, err)
		}
		if err := b.SetCursor(s.prog.Cursor); err != nil {
			return fmt.Errorf("resume from %s: %w", path, err)
		}
		s.lastGood, s.lastGoodPath = f, path
		s.lastSavedStep = tr.Steps()
		s.res.ResumedFrom = path
	} else {
		s.prog.Cursor = b.Cursor()
		lg, err := s.file()
		if err != nil {
			return err
		}
		s.lastGood = lg
	}
	s.wallBase = s.prog.WallSeconds
	s.startStep = tr.Steps()
	s.tokens = tr.State().Tokens
	s.startTokens = s.tokens
	return nil
}

// file returns the current state as a checkpoint file.
func (s *session) file() (*checkpoint.File, error) {
	s.prog.WallSeconds = s.wallBase + s.o.Now().Sub(s.start).Seconds()
	return checkpoint.NewTrainingFile(s.tr, s.ds.Vocab, s.runTOML, s.prog)
}

// doneReason says which budget the run has reached, or "".
func (s *session) doneReason() string {
	t, p := s.r.Training, s.prog
	switch {
	case t.MaxSteps > 0 && s.tr.Steps() >= int64(t.MaxSteps):
		return fmt.Sprintf("step budget reached (training.max_steps = %d)", t.MaxSteps)
	case p.PlannedSteps > 0 && s.tr.Steps() >= p.PlannedSteps:
		return fmt.Sprintf("planned end reached (step %d, planned from the deadline)", p.PlannedSteps)
	case t.MaxEpochs > 0 && p.Epoch >= t.MaxEpochs:
		return fmt.Sprintf("epoch budget reached (training.max_epochs = %d)", t.MaxEpochs)
	case t.MaxTokens > 0 && s.tokens >= t.MaxTokens:
		return fmt.Sprintf("token budget reached (training.max_tokens = %d)", t.MaxTokens)
	case t.EarlyStopPatience > 0 && p.BadValidations >= t.EarlyStopPatience:
		return fmt.Sprintf("early stopping: no validation improvement in %d evaluations (training.early_stop_patience)", p.BadValidations)
	case !s.deadline.IsZero() && !s.o.Now().Before(s.deadline):
		return timeBudgetReached
	}
	return ""
}

const timeBudgetReached = "time budget reached"

func (s *session) train() (*Result, error) {
	r, tr := s.r, s.tr
	s.d.writeOutcome(Outcome{State: StateTraining, Step: tr.Steps(), Time: s.o.Now()})
	s.obs.Started(Start{
		ResumedFrom: s.res.ResumedFrom, Step: tr.Steps(), Epochs: s.prog.Epoch,
		Model: s.net.Name(), Params: int64(s.net.NumParams()), TrainTokens: int64(s.ds.Train.Tokens.Len()),
		Streams: r.Training.BatchSize, UnrollSteps: r.Training.UnrollSteps,
		Budget: Budget{MaxSteps: r.Training.MaxSteps, MaxEpochs: r.Training.MaxEpochs, MaxTokens: r.Training.MaxTokens, Deadline: s.deadline},
	})
	due := s.prog.ValidationDue
	if due { // a cancellation interrupted it: run it before anything else
		if err := s.validate(); err != nil {
			return nil, err
		}
	}
	if reason := s.doneReason(); reason != "" && reason != timeBudgetReached && s.res.ResumedFrom != "" {
		if due {
			if _, err := s.saveStep(true); err != nil {
				return nil, err
			}
		}
		s.info("nothing to do: %s at step %d; raise a budget to train on", reason, tr.Steps())
		s.res.NothingToDo = true
		return s.result(reason), nil
	}
	s.prog.Finished, s.prog.FinishReason = false, ""
	if !s.deadline.IsZero() {
		s.meas = &measurement{from: tr.Steps()}
	}
	s.loopStart = s.o.Now()
	reason, err := s.loop()
	if err != nil {
		return nil, err
	}
	if (s.planning || s.replanning) && reason == timeBudgetReached {
		s.warn("the time budget ran out before the speed was measured (%d windows at least): the %s schedule was not planned and did not anneal; give the run more time",
			planSkipWindows+planTimedWindows, s.r.Training.Schedule)
	}
	if reason == "" { // cancelled
		path, err := s.saveStep(true)
		if err != nil {
			return nil, err
		}
		s.res.Interrupted = true
		s.res.LatestPath = path
		return s.result("interrupted"), nil
	}
	// At a budget: validate (unless just done), save, report.
	if err := s.validate(); err != nil {
		return nil, err
	}
	s.prog.Finished, s.prog.FinishReason = true, reason
	if _, err := s.saveStep(true); err != nil {
		return nil, err
	}
	return s.result(reason), nil
}

func (s *session) result(reason string) *Result {
	res := s.res
	res.Reason = reason
	res.Steps = s.tr.Steps()
	res.PlannedSteps = s.prog.PlannedSteps
	res.Deadline, res.Ended = s.deadline, s.o.Now()
	res.Epochs = s.prog.Epoch
	res.BestValBitsPerChar = math.NaN()
	if s.prog.HaveBest {
		res.BestValBitsPerChar = s.prog.BestBitsPerChar
		res.BestStep = s.prog.BestStep
	}
	if p := checkpoint.BestPath(s.ckdir); fileExists(p) {
		res.BestPath = p
	}
	if res.LatestPath == "" {
		if ents, err := checkpoint.List(s.ckdir); err == nil && len(ents) > 0 {
			res.LatestPath = ents[0].Path
		}
	}
	return &res
}

func fileExists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}

// loop trains until a budget (its reason returned), a cancellation ("")
// or an error.
func (s *session) loop() (string, error) {
	r := s.r
	bg := context.WithoutCancel(s.ctx) // a window once started is finished
	for {
		if reason := s.doneReason(); reason != "" {
			return reason, nil
		}
		if s.stopped() {
			return "", nil
		}
		bt, err := s.batches.Next(bg)
		if err == io.EOF {
			s.tr.ResetState()
			s.prog.Epoch = s.batches.Epoch()
			s.prog.Cursor = s.batches.Cursor()
			if err := s.validate(); err != nil {
				return "", err
			}
			continue
		}
		if err != nil {
			return "", err
		}
		info, err := s.tr.Step(bg, rnn.Window{B: bt.B, T: bt.T, Inputs: bt.Inputs, Targets: bt.Targets})
		if errors.Is(err, rnn.ErrNonFinite) {
			if err := s.recoverDivergence(oneLine(err.Error())); err != nil {
				return "", err
			}
			continue
		}
		if err != nil {
			return "", err
		}
		if info.Tokens == 0 {
			continue
		}
		// The loss is judged against its recent average, or against the
		// loss of a uniform prediction, ln V, until the average has
		// enough windows behind it.
		ref, refName := s.prog.LossAverage, "the recent average"
		if s.prog.LossCount < lossWarmupWindows {
			ref, refName = math.Log(float64(s.net.VocabSize())), "the uniform prediction's ln V ="
		}
		if f := r.Training.DivergenceFactor; f > 0 && info.Loss > f*ref {
			why := fmt.Sprintf("step %d: training loss %.4g is above %g × %s %.4g", info.Step, info.Loss, f, refName, ref)
			if err := s.recoverDivergence(why); err != nil {
				return "", err
			}
			continue
		}
		s.prog.LossCount++
		s.prog.LossAverage += (info.Loss - s.prog.LossAverage) / float64(min(s.prog.LossCount, lossAverageWindows))
		if info.Step > s.prog.DivergedAt {
			s.prog.Divergences = 0
		}
		s.tokens += int64(info.Tokens)
		s.prog.Cursor = s.batches.Cursor()
		s.winLoss += info.Loss * float64(info.Tokens)
		s.winTokens += int64(info.Tokens)
		s.lastInfo = info
		if s.o.AfterStep != nil {
			s.o.AfterStep(info.Step, s.net)
		}
		if s.meas != nil {
			if err := s.measure(); err != nil {
				return "", err
			}
		} else if err := s.keepUp(); err != nil {
			return "", err
		}

		if every := r.Evaluation.EverySteps; (every > 0 && info.Step%int64(every) == 0) || s.validationTimeDue() {
			if err := s.validate(); err != nil {
				return "", err
			}
		}
		if info.Step%int64(r.Output.MetricsEverySteps) == 0 {
			if err := s.writeMetrics(); err != nil {
				return "", err
			}
		}
		s.progress()
		if s.periodicDue(info.Step) {
			if _, err := s.saveStep(false); err != nil {
				return "", err
			}
		}
	}
}

// offClock adds the time since t0 to the time spent away from training.
func (s *session) offClock(t0 time.Time) { s.offTime += s.o.Now().Sub(t0) }

// validationTimeDue says evaluation.every_minutes have passed since the
// last validation (or the start of this invocation).
func (s *session) validationTimeDue() bool {
	m := s.r.Evaluation.EveryMinutes
	return m > 0 && s.o.Now().Sub(s.lastValidation) >= time.Duration(m*float64(time.Minute))
}

func (s *session) periodicDue(step int64) bool {
	c := s.r.Checkpoint
	if c.EverySteps > 0 && step%int64(c.EverySteps) == 0 {
		return true
	}
	return c.EveryMinutes > 0 && s.o.Now().Sub(s.lastSave) >= time.Duration(c.EveryMinutes*float64(time.Minute))
}

// recoverDivergence restores the last good state with a lowered learning
// rate, or gives up after training.divergence_retries tries in a row.
func (s *session) recoverDivergence(why string) error {
	t := s.r.Training
	step := s.tr.Steps()
	s.prog.Divergences++
	s.prog.DivergencesTotal++
	if s.prog.Divergences > t.DivergenceRetries {
		where := "the run's start"
		if s.lastGoodPath != "" {
			where = s.lastGoodPath
		}
		return &gaveUpError{fmt.Sprintf("training diverged (%s) and did not recover in %d tries with the learning rate lowered each time to %g; gave up. "+
			"The last good state is %s; lower training.learning_rate or training.clip_norm and train again",
			why, t.DivergenceRetries, s.r.Training.LearningRate*s.prog.LearningRateScale, where)}
	}
	scale := s.prog.LearningRateScale * t.DivergenceLRFactor
	tr, err := rnn.NewTrainer(s.net, s.trainConfig(scale), s.pool)
	if err != nil {
		return err
	}
	if err := checkpoint.RestoreTrainer(s.lastGood, tr); err != nil {
		return fmt.Errorf("divergence guard: restore the last good state: %w", err)
	}
	p, err := checkpoint.ReadProgress(s.lastGood)
	if err != nil {
		return err
	}
	if err := s.batches.SetCursor(p.Cursor); err != nil {
		return fmt.Errorf("divergence guard: %w", err)
	}
	p.Divergences, p.DivergencesTotal = s.prog.Divergences, s.prog.DivergencesTotal
	p.DivergedAt = max(s.prog.DivergedAt, step+1)
	p.LearningRateScale = scale
	p.PlannedSteps = s.prog.PlannedSteps // a plan made since the last good state stays
	s.prog = p
	s.tr = tr
	st := tr.State()
	s.tokens = st.Tokens
	s.winLoss, s.winTokens = 0, 0
	s.warn("divergence guard: %s; restored step %d and lowered the learning rate to %g (try %d of %d)",
		why, tr.Steps(), tr.LearningRate(), s.prog.Divergences, t.DivergenceRetries)
	return nil
}

// gaveUpError is the divergence guard's final error; it wraps ErrGaveUp.
type gaveUpError struct{ msg string }

func (e *gaveUpError) Error() string { return e.msg }
func (e *gaveUpError) Unwrap() error { return ErrGaveUp }

// validate measures the validation split once per step: cross-entropy,
// perplexity and bits per character; it feeds the schedule, keeps the best
// copy and counts the early-stopping patience. A cancellation abandons it,
// marking it due for the resumed run.
func (s *session) validate() error {
	defer s.offClock(s.o.Now())
	step := s.tr.Steps()
	if s.prog.LastValidationStep == step && !s.prog.ValidationDue {
		return nil
	}
	v := s.ds.Validation
	if v.Tokens.Len() == 0 {
		return nil
	}
	if s.valTokens == nil {
		// The tokens eval.Compare scores on validation, and its
		// denominator: the characters they cover (for symbols, without
		// the whitespace between them).
		n := scoredTokens(v.Tokens.Len(), s.r.Evaluation.HeldOutTokens)
		s.valTokens = v.Tokens.Slice(0, n)
		if n < v.Tokens.Len() {
			s.info("validation scores the first %d of the %d validation tokens (evaluation.heldout_tokens)", n, v.Tokens.Len())
		}
		s.valChars = v.PrefixCharacters(s.valTokens.Len())
	}
	// The model scores with one stream (it is never given SetScoring), so
	// the positions come in order and the tally sums them as eval.NewResult
	// sums a slice: the split is read window by window, never held.
	var tally eval.Tally
	if err := s.net.LogProbsEach(s.ctx, s.valTokens, func(_ int, lp float64) { tally.Add(lp) }); err != nil {
		if s.stopped() {
			s.prog.ValidationDue = true
			return nil
		}
		return fmt.Errorf("validation at step %d: %w", step, err)
	}
	res := tally.Result("rnn", "rnn", data.SplitValidation, int(s.valChars))
	val := Validation{Step: step, CrossEntropy: res.CrossEntropyNats / float64(res.Tokens), Perplexity: res.Perplexity, BitsPerChar: res.BitsPerChar}
	s.prog.ValidationDue = false
	s.prog.LastValidationStep = step
	s.lastValidation = s.o.Now()
	s.prog.LastBitsPerChar = val.BitsPerChar
	val.LearningRateDivided = s.tr.ReportValidation(val.CrossEntropy)
	val.Improved = !s.prog.HaveBest || val.CrossEntropy < s.prog.BestValidation
	if val.Improved {
		s.prog.HaveBest = true
		s.prog.BestValidation, s.prog.BestBitsPerChar, s.prog.BestStep = val.CrossEntropy, val.BitsPerChar, step
		s.prog.BadValidations = 0
	} else {
		s.prog.BadValidations++
	}
	val.BestBitsPerChar, val.BestStep = s.prog.BestBitsPerChar, s.prog.BestStep
	val.LearningRate = s.tr.LearningRate()
	s.val = &val
	s.obs.Validated(val)
	if err := s.writeMetrics(); err != nil {
		return err
	}
	if val.Improved {
		f, err := s.file()
		if err != nil {
			return err
		}
		if err := s.o.Save(checkpoint.BestPath(s.ckdir), f); err != nil {
			if err := s.saveFailed(err, false); err != nil {
				return err
			}
		}
	}
	return nil
}

// saveStep writes the periodic checkpoint of the current step and prunes
// the old ones. final marks the save at the end of the run, whose failure
// always stops it; a periodic failure follows checkpoint.on_save_error.
func (s *session) saveStep(final bool) (string, error) {
	defer s.offClock(s.o.Now())
	step := s.tr.Steps()
	path := checkpoint.StepPath(s.ckdir, step)
	if !final && s.lastSavedStep == step {
		return path, nil
	}
	f, err := s.file()
	if err != nil {
		return "", err
	}
	s.lastSave = s.o.Now()
	if err := s.o.Save(path, f); err != nil {
		return "", s.saveFailed(err, final)
	}
	s.lastGood, s.lastGoodPath, s.lastSavedStep = f, path, step
	if _, err := checkpoint.Prune(s.ckdir, s.r.Checkpoint.KeepLast, path); err != nil {
		s.warn("%s", oneLine(err.Error()))
	}
	return path, nil
}

// saveFailed applies checkpoint.on_save_error to a failed save: it returns
// the error, still wrapping its cause (errors.Is(err, syscall.ENOSPC) holds
// for a full disk), or warns and returns nil.
func (s *session) saveFailed(err error, final bool) error {
	if final || s.r.Checkpoint.OnSaveError == "stop" {
		return fmt.Errorf("%w; the previous checkpoints are untouched", err)
	}
	s.warn("%s; the previous checkpoints are untouched, training goes on (checkpoint.on_save_error = \"continue\")", oneLine(err.Error()))
	return nil
}

func (s *session) writeMetrics() error {
	l := MetricsLine{
		Version: metricsVersion,
		Step:    s.tr.Steps(), Epoch: s.prog.Epoch, Tokens: s.tokens,
		WallSeconds:  s.wallBase + s.o.Now().Sub(s.start).Seconds(),
		LearningRate: Number(s.tr.LearningRate()),
	}
	if s.winTokens > 0 {
		loss, g := Number(s.winLoss/float64(s.winTokens)), Number(s.lastInfo.GradNorm)
		l.TrainLoss, l.GradNorm = &loss, &g
		s.winLoss, s.winTokens = 0, 0
	}
	if v := s.val; v != nil {
		ce, ppl, bpc := Number(v.CrossEntropy), Number(v.Perplexity), Number(v.BitsPerChar)
		l.ValCE, l.ValPPL, l.ValBPC = &ce, &ppl, &bpc
		s.val = nil
	}
	if l.TrainLoss == nil && l.ValCE == nil {
		return nil
	}
	return s.metrics.Append(l)
}

// progress tells the observer where the run stands.
func (s *session) progress() {
	now := s.o.Now()
	el := now.Sub(s.start).Seconds()
	st := Status{
		Step: s.tr.Steps(), Epoch: s.prog.Epoch, Loss: s.lastInfo.Loss, GradNorm: s.lastInfo.GradNorm,
		ValBitsPerChar: math.NaN(), BestBitsPerChar: math.NaN(), ETA: -1, MaxSteps: int64(s.r.Training.MaxSteps),
	}
	if s.prog.HaveBest {
		st.ValBitsPerChar = s.prog.LastBitsPerChar
		st.BestBitsPerChar, st.BestStep = s.prog.BestBitsPerChar, s.prog.BestStep
	}
	st.PlannedSteps = s.prog.PlannedSteps
	if el > 0 {
		st.TokensPerSec = float64(s.tokens-s.startTokens) / el
		stepsPerSec := float64(s.tr.Steps()-s.startStep) / el
		st.ETA = s.eta(now, stepsPerSec, st.TokensPerSec)
		// The slack at the speed of the training loop, without the time
		// spent preparing the corpus and building the model.
		if lel := now.Sub(s.loopStart).Seconds(); st.PlannedSteps > 0 && !s.deadline.IsZero() && lel > 0 && s.tr.Steps() > s.startStep {
			loopRate := float64(s.tr.Steps()-s.startStep) / lel
			end := now.Add(time.Duration(float64(st.PlannedSteps-s.tr.Steps()) / loopRate * float64(time.Second)))
			st.PlanSlack, st.PlanSlackKnown = s.deadline.Sub(end), true
		}
	}
	s.obs.Progress(st)
}

// eta estimates the time to the first budget, or -1 when there is none.
func (s *session) eta(now time.Time, stepsPerSec, tokPerSec float64) time.Duration {
	t := s.r.Training
	best := math.Inf(1)
	if t.MaxSteps > 0 && stepsPerSec > 0 {
		best = math.Min(best, float64(int64(t.MaxSteps)-s.tr.Steps())/stepsPerSec)
	}
	if t.MaxTokens > 0 && tokPerSec > 0 {
		best = math.Min(best, float64(t.MaxTokens-s.tokens)/tokPerSec)
	}
	if p := s.prog.PlannedSteps; p > 0 && stepsPerSec > 0 {
		best = math.Min(best, float64(p-s.tr.Steps())/stepsPerSec)
	}
	if t.MaxEpochs > 0 && tokPerSec > 0 {
		perEpoch := float64(s.batches.StreamLen() * t.BatchSize)
		c := s.batches.Cursor()
		left := float64(t.MaxEpochs-s.prog.Epoch)*perEpoch - float64(c.Step*t.BatchSize)
		best = math.Min(best, left/tokPerSec)
	}
	if !s.deadline.IsZero() {
		best = math.Min(best, s.deadline.Sub(now).Seconds())
	}
	if math.IsInf(best, 1) {
		return -1
	}
	return time.Duration(math.Max(best, 0) * float64(time.Second))
}
