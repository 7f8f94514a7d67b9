package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/data/corpustest"
	"weft/rnn"
)

// Child processes: the test binary re-runs itself as weft when
// WEFT_TEST_AS_WEFT is set; WEFT_TEST_STEP_DELAY slows every training
// step so that a signal or a kill lands mid-run.
const (
	envAsWeft    = "WEFT_TEST_AS_WEFT"
	envStepDelay = "WEFT_TEST_STEP_DELAY"
)

// skipInShort skips a test that trains in this process from the -short
// run (make test's race-detector pass, where the instrumented kernels are
// very slow); the normal run covers it.
func skipInShort(t *testing.T) {
	if testing.Short() {
		t.Skip("trains in-process; run without -short")
	}
}

func TestMain(m *testing.M) {
	if os.Getenv(envAsWeft) == "1" {
		if d, err := time.ParseDuration(os.Getenv(envStepDelay)); err == nil && d > 0 {
			trainStepHook = func(int64, *rnn.Model[float32]) { time.Sleep(d) }
		}
		os.Exit(run(os.Args[1:], systemDeps()))
	}
	os.Exit(m.Run())
}

// trainCorpus is a small generated text: lines of words drawn from a fixed
// list by a seeded generator (about 12 KB).
func trainCorpus() string {
	return corpustest.WordLines(strings.Fields("the cat sat on a mat while dogs ran over green hills and cold rivers under bright skies at noon"), 1, 2, 12000)
}

// tinyRun writes the corpus and a run file for a tiny LSTM (H = 16) into
// dir and returns the run file's path. extra is appended to [training].
func tinyRun(t testing.TB, dir string) string {
	t.Helper()
	corpus := filepath.Join(dir, "corpus.txt")
	if err := os.WriteFile(corpus, []byte(trainCorpus()), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := fmt.Sprintf(`[data]
files = [%q]
tokenizer = "char"

[model]
hidden_size = 16
embedding_size = 8

[training]
batch_size = 4
unroll_steps = 16
seed = 5
threads = 1

[evaluation]
every_steps = 25

[checkpoint]
every_steps = 20
every_minutes = 0
keep_last = 3

[output]
log_every_seconds = 3600
metrics_every_steps = 10
`, corpus)
	path := filepath.Join(dir, "run.toml")
	if err := os.WriteFile(path, []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// weftIn runs weft in this process with buffers and the given clock (nil:
// the real one).
func weftIn(t testing.TB, now func() time.Time, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	if now == nil {
		now = time.Now
	}
	d := &deps{In: strings.NewReader(""), Out: &out, Err: &errb, Now: now}
	code := run(args, d)
	return code, out.String(), errb.String()
}

// weftChild starts the test binary as weft in a child process, with the
// step delay, and returns it with a reader of its standard error.
func weftChild(t testing.TB, delay time.Duration, args ...string) (*exec.Cmd, *bufio.Reader) {
	t.Helper()
	cmd := exec.Command(os.Args[0], args...)
	cmd.Env = append(os.Environ(), envAsWeft+"=1", envStepDelay+"="+delay.String())
	pr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	return cmd, bufio.NewReader(pr)
}

// waitFor reads lines from r until one contains marker, and returns all
// that was read; the rest is drained in the background into rest.
func waitFor(t testing.TB, r *bufio.Reader, marker string) (string, *syncBuffer) {
	t.Helper()
	var seen strings.Builder
	for {
		line, err := r.ReadString('\n')
		seen.WriteString(line)
		if strings.Contains(line, marker) {
			break
		}
		if err != nil {
			t.Fatalf("child ended before %q; its stderr: %s", marker, seen.String())
		}
	}
	rest := &syncBuffer{done: make(chan struct{})}
	go func() {
		io.Copy(rest, r)
		close(rest.done)
	}()
	return seen.String(), rest
}

type syncBuffer struct {
	mu   sync.Mutex
	b    bytes.Buffer
	done chan struct{} // closed at the end of the stream
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

func exitCode(err error) int {
	var ee *exec.ExitError
	if errors.As(err, &ee) {
		return ee.ExitCode()
	}
	if err != nil {
		return -1
	}
	return 0
}

// TestExactResume trains 2N steps straight, and in a child process that a
// signal stops mid-run, then resumes in this process to 2N: the final
// checkpoints must hold the same bytes. One case per optimizer with
// dropout and varied window lengths on, plus plain windows and BPTT
// replay; the plateau schedule makes the validations part of the state.
func TestExactResume(t *testing.T) {
	steps := 120
	if testing.Short() {
		steps = 60
	}
	type tc struct {
		name string
		sets []string
	}
	var cases []tc
	for _, opt := range []string{"sgd", "adagrad", "rmsprop", "adam", "adamw"} {
		sets := []string{"training.optimizer=" + opt, "model.dropout=0.2", "training.window_variation=0.3",
			"training.schedule=plateau", "training.plateau_patience=0"}
		if opt == "sgd" {
			sets = append(sets, "training.momentum=0.9", "training.learning_rate=0.5")
		}
		cases = append(cases, tc{opt + "+dropout+variation", sets})
	}
	cases = append(cases,
		tc{"adam plain", nil},
		tc{"gru replay", []string{"model.cell=gru", "training.bptt_advance_steps=8", "model.layers=2"}},
		tc{"class output layer", []string{"model.output_layer=class", "model.dropout=0.2", "training.optimizer=adamw"}},
	)
	if testing.Short() {
		cases = cases[3:4]
	}
	rng := rand.New(rand.NewPCG(7, 7))
	var stoppedAt []int64
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			cfg := tinyRun(t, dir)
			args := []string{"train", cfg, "--steps", fmt.Sprint(steps)}
			for _, s := range c.sets {
				args = append(args, "--set", s)
			}
			straight, split := filepath.Join(dir, "straight"), filepath.Join(dir, "split")
			if code, _, stderr := weftIn(t, nil, append(args, "--run", straight)...); code != exitOK {
				t.Fatalf("straight run: exit %d: %s", code, stderr)
			}
			child, stderr := weftChild(t, 4*time.Millisecond, append(args, "--run", split)...)
			seen, rest := waitFor(t, stderr, "training tokens")
			time.Sleep(time.Duration(20+rng.IntN(250)) * time.Millisecond)
			sig := []os.Signal{syscall.SIGTERM, os.Interrupt, syscall.SIGUSR1}[i%3]
			if err := child.Process.Signal(sig); err != nil {
				t.Fatal(err)
			}
			<-rest.done // read all before Wait closes the pipe
			err := child.Wait()
			if code := exitCode(err); code != exitInterrupted {
				t.Fatalf("child: got exit %d, want %d; stderr: %s%s", code, exitInterrupted, seen, rest.String())
			}
			if msg := rest.String(); !strings.Contains(msg, "run the same command again to resume") {
				t.Errorf("child's message lacks how to resume: %q", msg)
			}
			ents, err := checkpoint.List(filepath.Join(split, checkpointsDir))
			if err != nil || len(ents) == 0 {
				t.Fatalf("no checkpoint after the signal: %v", err)
			}
			if ents[0].Step >= int64(steps) {
				t.Fatalf("the signal came too late: the child reached step %d", ents[0].Step)
			}
			stoppedAt = append(stoppedAt, ents[0].Step)
			code, _, errs := weftIn(t, nil, append(args, "--run", split)...)
			if code != exitOK {
				t.Fatalf("resume: exit %d: %s", code, errs)
			}
			if !strings.Contains(errs, "resuming from") {
				t.Errorf("resume did not say where it resumed from: %s", errs)
			}
			last := checkpoint.StepName(int64(steps))
			sameTrainingState(t, filepath.Join(split, checkpointsDir, last), filepath.Join(straight, checkpointsDir, last))
			sameTrainingState(t, filepath.Join(split, checkpointsDir, checkpoint.BestName), filepath.Join(straight, checkpointsDir, checkpoint.BestName))
		})
	}
	if !t.Failed() {
		t.Logf("exact resume: %d cases, stopped by signal at steps %v of %d, all resumed bit-identically", len(cases), stoppedAt, steps)
	}
}

// TestKillSafety kills a child process with SIGKILL at random (seeded)
// moments while it trains and saves every 2 steps, at least 50 times:
// after every kill the run directory must load, and a final resume must
// reach the same state as an uninterrupted run.
func TestKillSafety(t *testing.T) {
	if testing.Short() {
		t.Skip("kill loop skipped in -short mode")
	}
	const kills = 50
	const budget = 45 * time.Second
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	killed := filepath.Join(dir, "killed")
	ckdir := filepath.Join(killed, checkpointsDir)
	common := []string{"train", cfg, "--set", "checkpoint.every_steps=2", "--set", "checkpoint.keep_last=2",
		"--set", "evaluation.every_steps=15", "--set", "model.dropout=0.1"}
	rng := rand.New(rand.NewPCG(2026, 12))
	start := time.Now()
	tried, recovered, withCheckpoint, midSave := 0, 0, 0, 0
	var maxStep int64
	for tried < kills && time.Since(start) < budget {
		cmd := exec.Command(os.Args[0], append(common, "--run", killed, "--steps", "100000", "--quiet")...)
		cmd.Env = append(os.Environ(), envAsWeft+"=1", envStepDelay+"=1ms")
		var errb syncBuffer
		cmd.Stderr = &errb
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		time.Sleep(time.Duration(15+rng.IntN(200)) * time.Millisecond)
		cmd.Process.Signal(syscall.SIGKILL)
		cmd.Wait()
		tried++
		if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() {
			t.Fatalf("kill %d: the child ended by itself before the kill (%v): %s", tried, cmd.ProcessState, errb.String())
		}
		if msg := errb.String(); msg != "" {
			t.Errorf("kill %d: the child printed %q (a resume should be silent with --quiet)", tried, msg)
		}
		if ents, err := os.ReadDir(ckdir); err == nil {
			for _, e := range ents {
				if strings.HasPrefix(e.Name(), ".tmp-") {
					midSave++ // killed while writing a checkpoint
					break
				}
			}
		}
		path, f, skipped, err := checkpoint.LoadNewestValid(ckdir)
		switch {
		case errors.Is(err, checkpoint.ErrNoCheckpoint), errors.Is(err, os.ErrNotExist):
			recovered++ // killed before the first save: a fresh start is right
			continue
		case err != nil:
			t.Fatalf("kill %d: the run directory does not load: %v", tried, err)
		}
		if len(skipped) > 0 {
			t.Errorf("kill %d: damaged checkpoints: %v", tried, skipped)
		}
		if _, err := checkpoint.ModelFromFile(f, path); err != nil {
			t.Fatalf("kill %d: %s: %v", tried, path, err)
		}
		st, err := checkpoint.ReadTrainerState(f)
		if err != nil {
			t.Fatal(err)
		}
		maxStep = max(maxStep, st.Step)
		recovered++
		withCheckpoint++
	}
	if tried < kills {
		t.Errorf("only %d kills in %v", tried, budget)
	}
	final := maxStep + 30
	code, _, stderr := weftIn(t, nil, append(common, "--run", killed, "--steps", fmt.Sprint(final))...)
	if code != exitOK {
		t.Fatalf("final resume: exit %d: %s", code, stderr)
	}
	straight := filepath.Join(dir, "straight")
	if code, _, stderr := weftIn(t, nil, append(common, "--run", straight, "--steps", fmt.Sprint(final))...); code != exitOK {
		t.Fatalf("straight run: exit %d: %s", code, stderr)
	}
	name := checkpoint.StepName(final)
	sameTrainingState(t, filepath.Join(ckdir, name), filepath.Join(straight, checkpointsDir, name))
	t.Logf("kill safety: %d runs killed (%d in the middle of a save), %d recovered (%d with a checkpoint), newest step reached %d, final step %d identical to the uninterrupted run, %v",
		tried, midSave, recovered, withCheckpoint, maxStep, final, time.Since(start).Round(time.Millisecond))
}

// TestSaveErrorPolicy injects a full disk into one periodic save.
// "continue" trains on with the previous checkpoint loadable; "stop" ends
// the run with status 1 and a clear message. The fault is injected at the
// run level (the saver); that a failed write leaves no temporary file is
// the checkpoint package's own test (its createTemp seam).
func TestSaveErrorPolicy(t *testing.T) {
	skipInShort(t)
	defer func(s func(string, *checkpoint.File) error) { saveCheckpoint = s }(saveCheckpoint)
	for _, mode := range []string{"continue", "stop"} {
		t.Run(mode, func(t *testing.T) {
			dir := t.TempDir()
			cfg := tinyRun(t, dir)
			runDir := filepath.Join(dir, "run")
			ckdir := filepath.Join(runDir, checkpointsDir)
			failAt := checkpoint.StepPath(ckdir, 40)
			saveCheckpoint = func(path string, f *checkpoint.File) error {
				if path == failAt {
					return fmt.Errorf("save checkpoint %q: disk full: write temporary file: %w", path, syscall.ENOSPC)
				}
				return checkpoint.Save(path, f)
			}
			code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "60", "--set", "checkpoint.on_save_error="+mode)
			if !strings.Contains(stderr, "disk full") || !strings.Contains(stderr, "previous checkpoints are untouched") {
				t.Errorf("stderr lacks the disk-full message: %s", stderr)
			}
			if _, err := checkpoint.Load(checkpoint.StepPath(ckdir, 20)); err != nil {
				t.Errorf("previous checkpoint: %v", err)
			}
			if fileExists(failAt) {
				t.Errorf("%s exists after its save failed", failAt)
			}
			ents, _ := os.ReadDir(ckdir)
			for _, e := range ents {
				if strings.HasPrefix(e.Name(), ".tmp-") {
					t.Errorf("temporary file %s left behind", e.Name())
				}
			}
			switch mode {
			case "continue":
				if code != exitOK || !strings.Contains(stderr, "training goes on") {
					t.Fatalf("got exit %d, want 0 with training going on: %s", code, stderr)
				}
				if _, err := checkpoint.Load(checkpoint.StepPath(ckdir, 60)); err != nil {
					t.Errorf("final checkpoint: %v", err)
				}
			case "stop":
				lines := strings.Split(strings.TrimSpace(stderr), "\n")
				if code != exitFailure || !strings.HasPrefix(lines[len(lines)-1], "weft: save checkpoint") {
					t.Fatalf("got exit %d, last line %q; want 1 and the save error", code, lines[len(lines)-1])
				}
			}
		})
	}
}

// TestResumeSkipsDamaged damages the newest checkpoint: the resume falls
// back to the one before and says so.
func TestResumeSkipsDamaged(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "60"); code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	ckdir := filepath.Join(runDir, checkpointsDir)
	newest := checkpoint.StepPath(ckdir, 60)
	b, err := os.ReadFile(newest)
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)/2] ^= 0x01
	if err := os.WriteFile(newest, b, 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "80")
	if code != exitOK {
		t.Fatalf("resume: exit %d: %s", code, stderr)
	}
	for _, want := range []string{"skipped a damaged checkpoint", "step-000000060", "checksum mismatch",
		"resuming from " + checkpoint.StepPath(ckdir, 40)} {
		if !strings.Contains(stderr, want) {
			t.Errorf("stderr lacks %q:\n%s", want, stderr)
		}
	}
	if _, err := checkpoint.Load(newest); err != nil {
		t.Errorf("step 60 was not rewritten by the resumed run: %v", err)
	}
}

// TestResumeConfigChecks: an unsafe change is refused naming its keys, a
// safe one accepted, and --restart moves the old checkpoints aside.
func TestResumeConfigChecks(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "20"); code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "40",
		"--set", "model.hidden_size=20", "--set", "training.learning_rate=0.01", "--set", "checkpoint.keep_last=5")
	if code != exitFailure || !strings.Contains(stderr, "in model.hidden_size, training.learning_rate, which cannot change") {
		t.Fatalf("unsafe change: got exit %d, stderr %q", code, stderr)
	}
	if strings.Contains(stderr, "keep_last") {
		t.Errorf("the refusal names a safe key: %s", stderr)
	}
	code, _, stderr = weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "40",
		"--set", "evaluation.every_steps=7", "--set", "checkpoint.keep_last=5", "--set", "output.metrics_every_steps=3", "--set", "training.threads=1")
	if code != exitOK || !strings.Contains(stderr, "resuming from") {
		t.Fatalf("safe change: got exit %d, stderr %q", code, stderr)
	}
	code, _, stderr = weftIn(t, func() time.Time { return time.Date(2026, 12, 1, 23, 5, 0, 0, time.UTC) },
		"train", cfg, "--run", runDir, "--steps", "10", "--restart", "--set", "model.hidden_size=20")
	if code != exitOK || !strings.Contains(stderr, "restart: moved checkpoints") || strings.Contains(stderr, "resuming") {
		t.Fatalf("--restart: got exit %d, stderr %q", code, stderr)
	}
	old := filepath.Join(runDir, "checkpoints.old-20261201-230500")
	if ents, err := checkpoint.List(old); err != nil || len(ents) == 0 || ents[0].Step != 40 {
		t.Errorf("old checkpoints not moved to %s: %v %v", old, ents, err)
	}
	m, err := runs.OpenModel(runDir, "latest")
	if err != nil || m.Step != 10 || m.Config.HiddenSize != 20 {
		t.Errorf("after --restart: got %v, %v; want a new run at step 10 with hidden_size 20", m, err)
	}
}

func TestChangedKeys(t *testing.T) {
	a := []byte("[model]\nhidden_size = 16\n[training]\nseed = 1\nmax_steps = 5\n")
	b := []byte("[model]\nhidden_size = 32\n[training]\nseed = 1\nmax_steps = 9\n[output]\nplots = false\n")
	got, err := changedKeys(a, b)
	if err != nil {
		t.Fatal(err)
	}
	want := []string{"model.hidden_size", "output.plots", "training.max_steps"}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("got %v, want %v", got, want)
	}
}

func TestTrainLocked(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if err := os.MkdirAll(runDir, 0o755); err != nil {
		t.Fatal(err)
	}
	l, err := runs.Lock(runDir)
	if err != nil {
		t.Fatal(err)
	}
	defer l.Unlock()
	host, _ := os.Hostname()
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "5")
	want := fmt.Sprintf("is in use by pid %d on host %s", os.Getpid(), host)
	if code != exitFailure || !strings.Contains(stderr, want) || strings.Count(stderr, "\n") != 1 {
		t.Errorf("got exit %d stderr %q, want exit 1 and one line with %q", code, stderr, want)
	}
}

// fakeClock is a clock that moves only when told.
type fakeClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *fakeClock) Add(d time.Duration) {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.mu.Unlock()
}

// withStepClock advances clk by d at every training step.
func withStepClock(t *testing.T, clk *fakeClock, d time.Duration) {
	old := trainStepHook
	trainStepHook = func(int64, *rnn.Model[float32]) { clk.Add(d) }
	t.Cleanup(func() { trainStepHook = old })
}

// TestTimeBudget: with the clock moving 250 ms per step, --for 5s stops
// after 20 steps (5 s / 250 ms), training.max_duration 3s after 12, and
// --until 12:00:04 (4 s away) after 16.
func TestTimeBudget(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	for i, tt := range []struct {
		args []string
		want int64
	}{
		{[]string{"--for", "5s"}, 20},
		{[]string{"--set", "training.max_duration=3s"}, 12},
		{[]string{"--until", "12:00:04"}, 16},
		{[]string{"--for", "5s", "--set", "training.max_duration=3s", "--steps", "8"}, 8},
	} {
		clk := &fakeClock{t: time.Date(2026, 12, 1, 12, 0, 0, 0, time.Local)}
		withStepClock(t, clk, 250*time.Millisecond)
		runDir := filepath.Join(dir, fmt.Sprint("run", i))
		code, out, stderr := weftIn(t, clk.Now, append([]string{"train", cfg, "--run", runDir}, tt.args...)...)
		if code != exitOK {
			t.Fatalf("%v: exit %d: %s", tt.args, code, stderr)
		}
		m, err := runs.OpenModel(runDir, "latest")
		if err != nil {
			t.Fatal(err)
		}
		if m.Step != tt.want {
			t.Errorf("%v: stopped at step %d, want %d (%s)", tt.args, m.Step, tt.want, out)
		}
	}
}

func TestParseUntil(t *testing.T) {
	zone := time.FixedZone("test", 3600)
	now := time.Date(2026, 12, 1, 22, 30, 0, 0, zone)
	for _, tt := range []struct {
		in   string
		want time.Time
		bad  bool
	}{
		{in: "07:00", want: time.Date(2026, 12, 2, 7, 0, 0, 0, zone)},
		{in: "23:15", want: time.Date(2026, 12, 1, 23, 15, 0, 0, zone)},
		{in: "22:30", want: time.Date(2026, 12, 2, 22, 30, 0, 0, zone)}, // now itself: the next day
		{in: "23:00:30", want: time.Date(2026, 12, 1, 23, 0, 30, 0, zone)},
		{in: "2026-12-03T06:00:00Z", want: time.Date(2026, 12, 3, 6, 0, 0, 0, time.UTC)},
		{in: "2026-11-30T06:00:00Z", bad: true},
		{in: "7am", bad: true},
		{in: "25:00", bad: true},
	} {
		got, err := parseUntil(tt.in, now)
		if tt.bad {
			if err == nil {
				t.Errorf("%q: got %v, want an error", tt.in, got)
			}
			continue
		}
		if err != nil || !got.Equal(tt.want) {
			t.Errorf("%q: got %v, %v; want %v", tt.in, got, err, tt.want)
		}
	}
}

// TestDivergenceGiveUp: a learning rate of 1e30 makes plain SGD overflow
// to NaN; each recovery halves the rate, which is not enough, and the run
// gives up after training.divergence_retries tries.
func TestDivergenceGiveUp(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", filepath.Join(dir, "run"), "--steps", "50",
		"--set", "training.optimizer=sgd", "--set", "training.learning_rate=1e30", "--set", "training.clip_norm=0",
		"--set", "training.divergence_retries=2")
	if code != exitFailure {
		t.Fatalf("got exit %d, want 1: %s", code, stderr)
	}
	if n := strings.Count(stderr, "divergence guard:"); n != 2 {
		t.Errorf("got %d recoveries, want 2: %s", n, stderr)
	}
	for _, want := range []string{"lowered the learning rate to 5e+29 (try 1 of 2)", "lowered the learning rate to 2.5e+29 (try 2 of 2)",
		"did not recover in 2 tries", "gave up"} {
		if !strings.Contains(stderr, want) {
			t.Errorf("stderr lacks %q:\n%s", want, stderr)
		}
	}
}

// TestDivergenceRecovers poisons one weight with NaN after step 13: step
// 14 fails, the run restores step 10 (the last save) with half the
// learning rate, and goes on to the budget.
func TestDivergenceRecovers(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	old := trainStepHook
	t.Cleanup(func() { trainStepHook = old })
	done := false
	trainStepHook = func(step int64, net *rnn.Model[float32]) {
		if step == 13 && !done {
			done = true
			net.Params()[1].Value[0] = float32(math.NaN())
		}
	}
	runDir := filepath.Join(dir, "run")
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "30", "--set", "checkpoint.every_steps=10", "--set", "evaluation.every_steps=0")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stderr, "step 14: non-finite loss or gradient") || !strings.Contains(stderr, "restored step 10 and lowered the learning rate to 0.001 (try 1 of 3)") {
		t.Errorf("stderr lacks the recovery:\n%s", stderr)
	}
	f, err := checkpoint.Load(checkpoint.StepPath(filepath.Join(runDir, checkpointsDir), 30))
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
	lines := metricsLines(t, runDir)
	if lr := lines[len(lines)-1]["learning_rate"]; lr != 0.001 {
		t.Errorf("last metrics line has learning rate %v, want 0.001", lr)
	}
}

func metricsLines(t *testing.T, runDir string) []map[string]any {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(runDir, metricsFile))
	if err != nil {
		t.Fatal(err)
	}
	var out []map[string]any
	for i, l := range strings.Split(strings.TrimSpace(string(b)), "\n") {
		var m map[string]any
		if err := json.Unmarshal([]byte(l), &m); err != nil {
			t.Fatalf("metrics line %d %q: %v", i+1, l, err)
		}
		out = append(out, m)
	}
	return out
}

// TestProgressLines: with the clock moving 250 ms per step and
// output.log_every_seconds = 1, a plain line appears every 4 steps, the
// first at step 5 (the interval starts at the first step's report); the
// metrics log has a line every 10 steps plus one per validation, with the
// documented keys.
func TestProgressLines(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	clk := &fakeClock{t: time.Date(2026, 12, 1, 12, 0, 0, 0, time.UTC)}
	withStepClock(t, clk, 250*time.Millisecond)
	runDir := filepath.Join(dir, "run")
	code, _, stderr := weftIn(t, clk.Now, "train", cfg, "--run", runDir, "--steps", "40", "--set", "output.log_every_seconds=1", "--set", "evaluation.every_steps=20")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	// Issue 12's layout: validation first, time left, then speed, loss
	// and gradient norm with their units, and the step last.
	re := regexp.MustCompile(`(?m)^\d\d:\d\d:\d\d  validation (not measured yet|[\d.]+ bits/char( \(best [\d.]+ at step [\d,]+\))?) \| \S+ left \| [\d,]+ tokens/s \| training loss [\d.]+ nats/token \| gradient norm \S+ before clipping \| step (\d+)`)
	var steps []string
	for _, m := range re.FindAllStringSubmatch(stderr, -1) {
		steps = append(steps, m[3])
	}
	want := []string{"5", "9", "13", "17", "21", "25", "29", "33", "37"}
	if !reflect.DeepEqual(steps, want) {
		t.Errorf("progress lines at steps %v, want %v:\n%s", steps, want, stderr)
	}
	if !strings.Contains(stderr, "  validation 4.") || !strings.Contains(stderr, " left | ") {
		t.Errorf("progress lines lack validation or ETA:\n%s", stderr)
	}
	lines := metricsLines(t, runDir)
	var trainSteps, valSteps []float64
	for _, l := range lines {
		for _, k := range []string{"step", "tokens", "wall_seconds", "learning_rate"} {
			if _, ok := l[k]; !ok {
				t.Errorf("metrics line %v lacks %q", l, k)
			}
		}
		if _, ok := l["train_loss"]; ok {
			if _, ok := l["grad_norm"]; !ok {
				t.Errorf("metrics line %v has train_loss without grad_norm", l)
			}
			trainSteps = append(trainSteps, l["step"].(float64))
		}
		if _, ok := l["val_bits_per_char"]; ok {
			for _, k := range []string{"val_cross_entropy", "val_perplexity"} {
				if _, ok := l[k]; !ok {
					t.Errorf("validation line %v lacks %q", l, k)
				}
			}
			valSteps = append(valSteps, l["step"].(float64))
		}
	}
	if !reflect.DeepEqual(trainSteps, []float64{10, 20, 30, 40}) || !reflect.DeepEqual(valSteps, []float64{20, 40}) {
		t.Errorf("training lines at %v (want 10 20 30 40), validation lines at %v (want 20 40)", trainSteps, valSteps)
	}
	// Wall time of step 10: 10 steps × 250 ms of the fake clock.
	if w := lines[0]["wall_seconds"]; w != 2.5 {
		t.Errorf("wall_seconds of the first line: got %v, want 2.5", w)
	}
	// tokens of step 10: 10 windows × 4 streams × 16 steps.
	if tok := lines[0]["tokens"]; tok != 640.0 {
		t.Errorf("tokens of the first line: got %v, want 640", tok)
	}
}

func TestProgressBarOnTerminal(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	var out, errb bytes.Buffer
	d := &deps{In: strings.NewReader(""), Out: &out, Err: &errb, Now: time.Now, ErrIsTerminal: true}
	old := trainStepHook
	trainStepHook = func(int64, *rnn.Model[float32]) { time.Sleep(5 * time.Millisecond) }
	defer func() { trainStepHook = old }()
	if code := run([]string{"train", cfg, "--run", filepath.Join(dir, "run"), "--steps", "40", "--set", "evaluation.every_steps=0"}, d); code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	s := errb.String()
	if !strings.Contains(s, "\r") || !strings.Contains(s, "tokens/s") || !strings.Contains(s, "/40") {
		t.Errorf("no bar drawn on the terminal:\n%q", s)
	}
}

// TestSignalsInProcess sends two signals: the first stops the run after
// the current window with a save (status 3), the second exits at once with
// status 130.
func TestSignalsInProcess(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	var exited []int
	var mu sync.Mutex
	oldExit := exitNow
	exitNow = func(code int) { mu.Lock(); exited = append(exited, code); mu.Unlock() }
	defer func() { exitNow = oldExit }()
	sig := make(chan os.Signal, 2)
	var out, errb bytes.Buffer
	d := &deps{In: strings.NewReader(""), Out: &out, Err: &syncWriter{w: &errb}, Now: time.Now, Signals: sig}
	oldHook := trainStepHook
	trainStepHook = func(step int64, _ *rnn.Model[float32]) {
		if step == 7 {
			sig <- os.Interrupt
			sig <- os.Interrupt
			time.Sleep(50 * time.Millisecond) // let the watcher see both
		}
	}
	defer func() { trainStepHook = oldHook }()
	runDir := filepath.Join(dir, "run")
	code := run([]string{"train", cfg, "--run", runDir, "--steps", "100"}, d)
	mu.Lock()
	defer mu.Unlock()
	if code != exitInterrupted || !reflect.DeepEqual(exited, []int{exitAbandoned}) {
		t.Fatalf("got exit %d and immediate exits %v, want %d and [%d]; stderr %s", code, exited, exitInterrupted, exitAbandoned, errb.String())
	}
	msg := errb.String()
	for _, want := range []string{"finishing the current window and saving", "SIGINT: finishing", "second SIGINT: exiting at once", "stopped by SIGINT at step 7"} {
		if !strings.Contains(msg, want) {
			t.Errorf("stderr lacks %q:\n%s", want, msg)
		}
	}
	if _, err := checkpoint.Load(checkpoint.StepPath(filepath.Join(runDir, checkpointsDir), 7)); err != nil {
		t.Errorf("no checkpoint at the stop: %v", err)
	}
}

type syncWriter struct {
	mu sync.Mutex
	w  io.Writer
}

func (s *syncWriter) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.w.Write(p)
}

// TestResumeFromOtherDirectory: a run file naming its corpus by a relative
// path resumes from another working directory (the recorded run file holds
// the absolute path).
func TestResumeFromOtherDirectory(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	b, err := os.ReadFile(cfg)
	if err != nil {
		t.Fatal(err)
	}
	rel := strings.Replace(string(b), fmt.Sprintf("%q", filepath.Join(dir, "corpus.txt")), `"corpus.txt"`, 1)
	if err := os.WriteFile(cfg, []byte(rel), 0o644); err != nil {
		t.Fatal(err)
	}
	sub := filepath.Join(dir, "sub")
	if err := os.Mkdir(sub, 0o755); err != nil {
		t.Fatal(err)
	}
	t.Chdir(dir)
	if code, _, stderr := weftIn(t, nil, "train", "run.toml", "--run", "run", "--steps", "10"); code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	t.Chdir(sub)
	code, _, stderr := weftIn(t, nil, "train", "../run.toml", "--run", "../run", "--steps", "20")
	if code != exitOK || !strings.Contains(stderr, "resuming from") {
		t.Fatalf("resume from another directory: exit %d: %s", code, stderr)
	}
}

// TestResumeAfterInterruptedValidation stops the run by a signal just
// before the validation of step 25, which the signal abandons: the saved
// state marks it due, the resumed run runs it first, and the result is the
// uninterrupted run's.
func TestResumeAfterInterruptedValidation(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	args := []string{"train", cfg, "--steps", "60", "--set", "training.schedule=plateau"}
	straight, split := filepath.Join(dir, "straight"), filepath.Join(dir, "split")
	if code, _, stderr := weftIn(t, nil, append(args, "--run", straight)...); code != exitOK {
		t.Fatalf("straight: exit %d: %s", code, stderr)
	}
	sig := make(chan os.Signal, 1)
	old := trainStepHook
	trainStepHook = func(step int64, _ *rnn.Model[float32]) {
		if step == 25 { // evaluation.every_steps = 25: the validation comes next
			sig <- syscall.SIGTERM
			time.Sleep(50 * time.Millisecond) // let the watcher cancel
		}
	}
	var out, errb bytes.Buffer
	d := &deps{In: strings.NewReader(""), Out: &out, Err: &syncWriter{w: &errb}, Now: time.Now, Signals: sig}
	code := run(append(args, "--run", split), d)
	trainStepHook = old
	if code != exitInterrupted {
		t.Fatalf("got exit %d, want %d: %s", code, exitInterrupted, errb.String())
	}
	f, err := checkpoint.Load(checkpoint.StepPath(filepath.Join(split, checkpointsDir), 25))
	if err != nil {
		t.Fatal(err)
	}
	if p, err := checkpoint.ReadProgress(f); err != nil || !p.ValidationDue {
		t.Fatalf("step 25 checkpoint: validation due %v (%v), want true", p.ValidationDue, err)
	}
	code, _, stderr := weftIn(t, nil, append(args, "--run", split)...)
	if code != exitOK || !strings.Contains(stderr, "validation at step 25") {
		t.Fatalf("resume: exit %d, stderr %s; want the due validation of step 25", code, stderr)
	}
	last := checkpoint.StepName(60)
	sameTrainingState(t, filepath.Join(split, checkpointsDir, last), filepath.Join(straight, checkpointsDir, last))
}

// TestRetention: checkpoint.keep_last periodic checkpoints stay, plus the
// best copy.
func TestRetention(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "100",
		"--set", "checkpoint.every_steps=10", "--set", "checkpoint.keep_last=3"); code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	ents, err := os.ReadDir(filepath.Join(runDir, checkpointsDir))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range ents {
		names = append(names, e.Name())
	}
	want := []string{checkpoint.BestName, checkpoint.StepName(80), checkpoint.StepName(90), checkpoint.StepName(100)}
	if !reflect.DeepEqual(names, want) {
		t.Errorf("checkpoints: got %v, want %v", names, want)
	}
}

// TestTrainLockedByChild: while a child process trains in a directory, a
// second weft train there fails at once naming the child's host and pid.
func TestTrainLockedByChild(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	child, stderr := weftChild(t, 5*time.Millisecond, "train", cfg, "--run", runDir, "--steps", "100000")
	defer func() {
		child.Process.Signal(syscall.SIGKILL)
		child.Wait()
	}()
	waitFor(t, stderr, "training tokens")
	host, _ := os.Hostname()
	start := time.Now()
	code, _, msg := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "5")
	want := fmt.Sprintf("is in use by pid %d on host %s", child.Process.Pid, host)
	if code != exitFailure || !strings.Contains(msg, want) {
		t.Errorf("got exit %d stderr %q, want exit 1 naming %q", code, msg, want)
	}
	if el := time.Since(start); el > 2*time.Second {
		t.Errorf("the refusal took %v, want it at once", el)
	}
}
