package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync/atomic"
	"syscall"
	"time"

	"weft/checkpoint"
	"weft/configs"
	"weft/data"
	"weft/eval"
	"weft/rnn"
	"weft/rnn/linalg"
)

// Seams for tests: the checkpoint writer (to inject a full disk), a hook
// after every training step, and the immediate exit of a second signal.
var (
	saveCheckpoint = checkpoint.Save
	trainStepHook  func(step int64, net *rnn.Model[float32])
	exitNow        = os.Exit
)

// Divergence guard: the moving average of the training loss spans about
// lossAverageWindows windows, and spikes are judged only after
// lossWarmupWindows windows of it.
const (
	lossAverageWindows = 50
	lossWarmupWindows  = 20
)

// session is one invocation of training on a run directory.
type session struct {
	cc      cmdContext
	r       *configs.Run
	o       trainRunOptions
	rd      *runDir
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

	rep     *reporter
	metrics *os.File

	start       time.Time // of this invocation
	deadline    time.Time // zero: none
	wallBase    float64   // WallSeconds of earlier invocations
	startStep   int64
	tokens      int64 // trained tokens in all
	startTokens int64

	lastSave      time.Time
	lastSavedStep int64
	logp          []float64

	// Since the last metrics line.
	winLoss   float64
	winTokens int64
	lastInfo  rnn.StepInfo
	val       *valFigures // of the current step, for its metrics line

	stopCtx context.Context
	stopSig atomic.Value // string
	res     trainResult
}

type valFigures struct {
	CrossEntropy float64 // nats per token
	Perplexity   float64
	BitsPerChar  float64
}

// trainRun trains r in runDir: it creates or resumes the run directory,
// trains until a budget, early stopping, a signal or an error, and saves.
// An interruption by signal is not an error: the result says Interrupted.
// demo calls it too.
func trainRun(cc cmdContext, r *configs.Run, runDir string, o trainRunOptions) (*trainResult, error) {
	rd, err := openRunDir(runDir)
	if err != nil {
		return nil, err
	}
	defer rd.Close()
	r, err = absoluteFiles(r)
	if err != nil {
		return nil, err
	}
	s := &session{cc: cc, r: r, o: o, rd: rd, ckdir: rd.file(checkpointsDir), lastSavedStep: -1}
	s.rep = newReporter(cc.deps, time.Duration(r.Output.LogEverySeconds*float64(time.Second)), o.Quiet)
	defer s.rep.finish()

	stopCtx, stop := context.WithCancel(cc.ctx)
	defer stop()
	s.stopCtx = stopCtx
	done := make(chan struct{})
	defer close(done)
	if cc.Signals != nil {
		defer cc.claimSignals()()
		go s.watchSignals(done, stop)
	}

	res, err := s.run()
	if s.metrics != nil {
		if cerr := s.metrics.Close(); err == nil && cerr != nil {
			err = fmt.Errorf("metrics log: %w", cerr)
		}
	}
	if s.pool != nil {
		s.pool.Close()
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

// signalName names the stopping signals as a user knows them.
func signalName(sig os.Signal) string {
	switch sig {
	case os.Interrupt:
		return "SIGINT"
	case syscall.SIGTERM:
		return "SIGTERM"
	case syscall.SIGUSR1:
		return "SIGUSR1"
	}
	return sig.String()
}

// watchSignals turns the first stopping signal into a graceful stop and a
// second into an immediate exit.
func (s *session) watchSignals(done <-chan struct{}, stop context.CancelFunc) {
	n := 0
	for {
		select {
		case <-done:
			return
		case sig := <-s.cc.Signals:
			n++
			if n == 1 {
				s.stopSig.Store(signalName(sig))
				s.rep.warnf("%s: finishing the current window and saving; send it again to quit at once without saving", signalName(sig))
				stop()
				continue
			}
			s.rep.warnf("second %s: exiting at once without saving (status %d); the checkpoints in %s are intact", signalName(sig), exitAbandoned, s.ckdir)
			exitNow(exitAbandoned)
			return
		}
	}
}

func (s *session) stopped() bool { return s.stopCtx.Err() != nil }

func (s *session) run() (*trainResult, error) {
	r, rd := s.r, s.rd
	now := s.cc.Now()
	s.start, s.lastSave = now, now
	if err := s.setDeadline(now); err != nil {
		return nil, err
	}
	if s.o.Restart {
		moved, err := moveAside(rd, now)
		if err != nil {
			return nil, err
		}
		for _, m := range moved {
			s.rep.logf("restart: moved %s", m)
		}
	}
	if err := os.MkdirAll(s.ckdir, 0o755); err != nil {
		return nil, fmt.Errorf("run directory %s: %w", rd.Path, unwrapPath(err))
	}
	if removed, err := checkpoint.CleanTemp(s.ckdir); err != nil {
		return nil, err
	} else if len(removed) > 0 {
		s.rep.logf("removed %d temporary file(s) left by an interrupted save", len(removed))
	}
	runTOML, err := configs.Encode(r)
	if err != nil {
		return nil, err
	}
	s.runTOML = runTOML

	// Resume from the newest intact checkpoint, if any.
	path, f, skipped, err := checkpoint.LoadNewestValid(s.ckdir)
	for _, e := range skipped {
		s.rep.warnf("skipped a damaged checkpoint: %s", oneLine(e.Error()))
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
			s.rep.warnf("resuming from %s, the newest intact checkpoint", path)
		}
	}
	if err := writeFileAtomic(rd.file(runConfigFile), runTOML); err != nil {
		return nil, err
	}
	ds, err := prepareData(s.cc, r, rd)
	if err != nil {
		return nil, err
	}
	s.ds = ds
	if s.vocabJS, err = ds.Vocab.MarshalJSON(); err != nil {
		return nil, err
	}
	if f != nil && !sameVocab(f, s.vocabJS) {
		return nil, fmt.Errorf("the vocabulary prepared from the corpus differs from the one in %s: the corpus changed since the run started; use another --run directory, or --restart to start over", path)
	}
	if err := s.build(f, path); err != nil {
		return nil, err
	}
	if err := s.openMetrics(); err != nil {
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
	tc.LearningRate *= scale
	tc.MinLearningRate *= scale
	return tc
}

// build makes the model, trainer and batches, fresh or restored from f.
func (s *session) build(f *checkpoint.File, path string) error {
	r := s.r
	threads := r.Training.Threads
	if threads == 0 {
		threads = runtime.NumCPU()
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
	s.prog.WallSeconds = s.wallBase + s.cc.Now().Sub(s.start).Seconds()
	return checkpoint.NewTrainingFile(s.tr, s.ds.Vocab, s.runTOML, s.prog)
}

// openMetrics opens the metrics log for appending, first dropping the
// lines past the state training resumes from (written before a crash) and
// any line a crash cut short.
func (s *session) openMetrics() error {
	path := s.rd.file(metricsFile)
	if old, err := os.ReadFile(path); err == nil {
		var keep bytes.Buffer
		sc := bufio.NewScanner(bytes.NewReader(old))
		sc.Buffer(nil, 1<<20)
		for sc.Scan() {
			var l struct {
				Step *int64 `json:"step"`
			}
			if json.Unmarshal(sc.Bytes(), &l) != nil || l.Step == nil || *l.Step > s.tr.Steps() {
				continue
			}
			keep.Write(sc.Bytes())
			keep.WriteByte('\n')
		}
		if !bytes.Equal(keep.Bytes(), old) {
			if err := writeFileAtomic(path, keep.Bytes()); err != nil {
				return err
			}
		}
	}
	m, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_APPEND, 0o644)
	if err != nil {
		return fmt.Errorf("metrics log %s: %w", path, unwrapPath(err))
	}
	s.metrics = m
	return nil
}

// doneReason says which budget the run has reached, or "".
func (s *session) doneReason() string {
	t, p := s.r.Training, s.prog
	switch {
	case t.MaxSteps > 0 && s.tr.Steps() >= int64(t.MaxSteps):
		return fmt.Sprintf("step budget reached (training.max_steps = %d)", t.MaxSteps)
	case t.MaxEpochs > 0 && p.Epoch >= t.MaxEpochs:
		return fmt.Sprintf("epoch budget reached (training.max_epochs = %d)", t.MaxEpochs)
	case t.MaxTokens > 0 && s.tokens >= t.MaxTokens:
		return fmt.Sprintf("token budget reached (training.max_tokens = %d)", t.MaxTokens)
	case t.EarlyStopPatience > 0 && p.BadValidations >= t.EarlyStopPatience:
		return fmt.Sprintf("early stopping: no validation improvement in %d evaluations (training.early_stop_patience)", p.BadValidations)
	case !s.deadline.IsZero() && !s.cc.Now().Before(s.deadline):
		return "time budget reached"
	}
	return ""
}

func (s *session) train() (*trainResult, error) {
	r, tr := s.r, s.tr
	what := "training"
	if s.res.ResumedFrom != "" {
		what = fmt.Sprintf("resuming from %s: step %d, %d epochs completed;", s.res.ResumedFrom, tr.Steps(), s.prog.Epoch)
	}
	s.rep.logf("%s %s, %s parameters, %s training tokens, %d streams × %d steps, %s",
		what, s.net.Name(), thousands(int64(s.net.NumParams())), thousands(int64(len(s.ds.Train.Tokens))),
		r.Training.BatchSize, r.Training.UnrollSteps, s.budgetText())
	due := s.prog.ValidationDue
	if due { // a signal interrupted it: run it before anything else
		if err := s.validate(); err != nil {
			return nil, err
		}
	}
	if reason := s.doneReason(); reason != "" && reason != "time budget reached" && s.res.ResumedFrom != "" {
		if due {
			if _, err := s.saveStep(true); err != nil {
				return nil, err
			}
		}
		s.rep.logf("nothing to do: %s at step %d; raise a budget to train on", reason, tr.Steps())
		return s.result(reason), nil
	}
	s.prog.Finished, s.prog.FinishReason = false, ""
	reason, err := s.loop()
	if err != nil {
		return nil, err
	}
	if reason == "" { // stopped by a signal
		path, err := s.saveStep(true)
		if err != nil {
			return nil, err
		}
		s.res.Interrupted = true
		s.res.Signal, _ = s.stopSig.Load().(string)
		if s.res.Signal == "" {
			s.res.Signal = "cancellation"
		}
		s.res.LatestPath = path
		s.rep.finish()
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
	s.rep.finish()
	res := s.result(reason)
	if !s.o.Quiet {
		fmt.Fprintf(s.cc.Out, "%s at step %s (%d epochs completed).", reason, thousands(res.Steps), res.Epochs)
		if s.prog.HaveBest {
			fmt.Fprintf(s.cc.Out, " Best validation: %.4f bits per character at step %s (%s).", s.prog.BestBitsPerChar, thousands(s.prog.BestStep), res.BestPath)
		}
		fmt.Fprintf(s.cc.Out, " Newest checkpoint: %s\n", res.LatestPath)
	}
	return res, nil
}

func (s *session) result(reason string) *trainResult {
	res := s.res
	res.Reason = reason
	res.Steps = s.tr.Steps()
	res.Epochs = s.prog.Epoch
	res.BestValBitsPerChar = math.NaN()
	if s.prog.HaveBest {
		res.BestValBitsPerChar = s.prog.BestBitsPerChar
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

func (s *session) budgetText() string {
	t := s.r.Training
	var parts []string
	if t.MaxSteps > 0 {
		parts = append(parts, fmt.Sprintf("%s steps", thousands(int64(t.MaxSteps))))
	}
	if t.MaxEpochs > 0 {
		parts = append(parts, fmt.Sprintf("%d epochs", t.MaxEpochs))
	}
	if t.MaxTokens > 0 {
		parts = append(parts, fmt.Sprintf("%s tokens", thousands(t.MaxTokens)))
	}
	if !s.deadline.IsZero() {
		parts = append(parts, "until "+s.deadline.Format("2006-01-02 15:04:05"))
	}
	if len(parts) == 0 {
		return "no budget (stop with Ctrl-C; the state is saved)"
	}
	return "budget: " + strings.Join(parts, ", ") + ", whichever comes first"
}

// loop trains until a budget (its reason returned), a stop signal ("") or
// an error.
func (s *session) loop() (string, error) {
	r := s.r
	bg := context.WithoutCancel(s.cc.ctx) // a window once started is finished
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
		if trainStepHook != nil {
			trainStepHook(info.Step, s.net)
		}

		if every := r.Evaluation.EverySteps; every > 0 && info.Step%int64(every) == 0 {
			if err := s.validate(); err != nil {
				return "", err
			}
		}
		if info.Step%int64(r.Output.MetricsEverySteps) == 0 {
			if err := s.writeMetrics(); err != nil {
				return "", err
			}
		}
		s.report()
		if s.periodicDue(info.Step) {
			if _, err := s.saveStep(false); err != nil {
				return "", err
			}
		}
	}
}

func (s *session) periodicDue(step int64) bool {
	c := s.r.Checkpoint
	if c.EverySteps > 0 && step%int64(c.EverySteps) == 0 {
		return true
	}
	return c.EveryMinutes > 0 && s.cc.Now().Sub(s.lastSave) >= time.Duration(c.EveryMinutes*float64(time.Minute))
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
		return fmt.Errorf("training diverged (%s) and did not recover in %d tries with the learning rate lowered each time to %g; gave up. "+
			"The last good state is %s; lower training.learning_rate or training.clip_norm and train again",
			why, t.DivergenceRetries, s.r.Training.LearningRate*s.prog.LearningRateScale, where)
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
	s.prog = p
	s.tr = tr
	st := tr.State()
	s.tokens = st.Tokens
	s.winLoss, s.winTokens = 0, 0
	s.rep.warnf("divergence guard: %s; restored step %d and lowered the learning rate to %g (try %d of %d)",
		why, tr.Steps(), tr.LearningRate(), s.prog.Divergences, t.DivergenceRetries)
	return nil
}

// validate measures the validation split once per step: cross-entropy,
// perplexity and bits per character; it feeds the schedule, keeps the best
// copy and counts the early-stopping patience. A stop signal abandons it,
// marking it due for the resumed run.
func (s *session) validate() error {
	step := s.tr.Steps()
	if s.prog.LastValidationStep == step && !s.prog.ValidationDue {
		return nil
	}
	v := s.ds.Validation
	if len(v.Tokens) == 0 {
		return nil
	}
	if cap(s.logp) < len(v.Tokens) {
		s.logp = make([]float64, len(v.Tokens))
	}
	logp := s.logp[:len(v.Tokens)]
	if err := s.net.LogProbs(s.stopCtx, logp, v.Tokens); err != nil {
		if s.stopped() {
			s.prog.ValidationDue = true
			return nil
		}
		return fmt.Errorf("validation at step %d: %w", step, err)
	}
	res := eval.NewResult("rnn", "rnn", data.SplitValidation, logp, int(v.Characters))
	fig := valFigures{CrossEntropy: res.CrossEntropyNats / float64(res.Tokens), Perplexity: res.Perplexity, BitsPerChar: res.BitsPerChar}
	s.val = &fig
	s.prog.ValidationDue = false
	s.prog.LastValidationStep = step
	s.prog.LastBitsPerChar = fig.BitsPerChar
	divided := s.tr.ReportValidation(fig.CrossEntropy)
	improved := !s.prog.HaveBest || fig.CrossEntropy < s.prog.BestValidation
	if improved {
		s.prog.HaveBest = true
		s.prog.BestValidation, s.prog.BestBitsPerChar, s.prog.BestStep = fig.CrossEntropy, fig.BitsPerChar, step
		s.prog.BadValidations = 0
	} else {
		s.prog.BadValidations++
	}
	note := ""
	switch {
	case improved:
		note = " (best so far)"
	case s.prog.HaveBest:
		note = fmt.Sprintf(" (best %.4f at step %s)", s.prog.BestBitsPerChar, thousands(s.prog.BestStep))
	}
	s.rep.logf("validation at step %s: %.4f bits per character, perplexity %.3f, %.4f nats per token%s",
		thousands(step), fig.BitsPerChar, fig.Perplexity, fig.CrossEntropy, note)
	if divided {
		s.rep.logf("validation loss stopped improving: learning rate divided to %g", s.tr.LearningRate())
	}
	if err := s.writeMetrics(); err != nil {
		return err
	}
	if improved {
		f, err := s.file()
		if err != nil {
			return err
		}
		if err := saveCheckpoint(checkpoint.BestPath(s.ckdir), f); err != nil {
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
	step := s.tr.Steps()
	path := checkpoint.StepPath(s.ckdir, step)
	if !final && s.lastSavedStep == step {
		return path, nil
	}
	f, err := s.file()
	if err != nil {
		return "", err
	}
	s.lastSave = s.cc.Now()
	if err := saveCheckpoint(path, f); err != nil {
		return "", s.saveFailed(err, final)
	}
	s.lastGood, s.lastGoodPath, s.lastSavedStep = f, path, step
	if _, err := checkpoint.Prune(s.ckdir, s.r.Checkpoint.KeepLast, path); err != nil {
		s.rep.warnf("%s", oneLine(err.Error()))
	}
	return path, nil
}

// saveFailed applies checkpoint.on_save_error to a failed save.
func (s *session) saveFailed(err error, final bool) error {
	msg := oneLine(err.Error())
	if final || s.r.Checkpoint.OnSaveError == "stop" {
		return fmt.Errorf("%s; the previous checkpoints are untouched", msg)
	}
	s.rep.warnf("%s; the previous checkpoints are untouched, training goes on (checkpoint.on_save_error = \"continue\")", msg)
	return nil
}

// jnum is a float written as JSON null when it is not finite.
type jnum float64

func (f jnum) MarshalJSON() ([]byte, error) {
	if !finite(float64(f)) {
		return []byte("null"), nil
	}
	return json.Marshal(float64(f))
}

// metricsLine is one line of metrics.jsonl.
type metricsLine struct {
	Step         int64   `json:"step"`
	Epoch        int     `json:"epoch"`
	Tokens       int64   `json:"tokens"`
	WallSeconds  float64 `json:"wall_seconds"`
	LearningRate jnum    `json:"learning_rate"`
	// TrainLoss is the token-weighted mean training loss, in nats per
	// token, of the windows since the previous line; GradNorm is the
	// gradient norm before clipping of the last window.
	TrainLoss *jnum `json:"train_loss,omitempty"`
	GradNorm  *jnum `json:"grad_norm,omitempty"`
	ValCE     *jnum `json:"val_cross_entropy,omitempty"`
	ValPPL    *jnum `json:"val_perplexity,omitempty"`
	ValBPC    *jnum `json:"val_bits_per_char,omitempty"`
}

func (s *session) writeMetrics() error {
	l := metricsLine{
		Step: s.tr.Steps(), Epoch: s.prog.Epoch, Tokens: s.tokens,
		WallSeconds:  s.wallBase + s.cc.Now().Sub(s.start).Seconds(),
		LearningRate: jnum(s.tr.LearningRate()),
	}
	if s.winTokens > 0 {
		loss, g := jnum(s.winLoss/float64(s.winTokens)), jnum(s.lastInfo.GradNorm)
		l.TrainLoss, l.GradNorm = &loss, &g
		s.winLoss, s.winTokens = 0, 0
	}
	if v := s.val; v != nil {
		ce, ppl, bpc := jnum(v.CrossEntropy), jnum(v.Perplexity), jnum(v.BitsPerChar)
		l.ValCE, l.ValPPL, l.ValBPC = &ce, &ppl, &bpc
		s.val = nil
	}
	if l.TrainLoss == nil && l.ValCE == nil {
		return nil
	}
	b, err := json.Marshal(l)
	if err != nil {
		return err
	}
	if _, err := s.metrics.Write(append(b, '\n')); err != nil {
		return fmt.Errorf("metrics log %s: %w", s.metrics.Name(), unwrapPath(err))
	}
	return nil
}

// report updates the progress display.
func (s *session) report() {
	now := s.cc.Now()
	el := now.Sub(s.start).Seconds()
	st := progressStatus{
		Step: s.tr.Steps(), Epoch: s.prog.Epoch, Loss: s.lastInfo.Loss, GradNorm: s.lastInfo.GradNorm,
		ValBitsPerChar: math.NaN(), ETA: -1, MaxSteps: int64(s.r.Training.MaxSteps),
	}
	if s.prog.HaveBest {
		st.ValBitsPerChar = s.prog.LastBitsPerChar
	}
	if el > 0 {
		st.TokensPerSec = float64(s.tokens-s.startTokens) / el
		stepsPerSec := float64(s.tr.Steps()-s.startStep) / el
		st.ETA = s.eta(now, stepsPerSec, st.TokensPerSec)
	}
	s.rep.update(st)
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
