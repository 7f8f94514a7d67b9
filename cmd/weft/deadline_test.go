package main

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"weft/checkpoint/runs"
	"weft/configs"
)

// TestStatusTextPlan: the progress line shows a deadline plan's end and
// whether the run is on time, in one part after the time left; a run
// without a plan keeps the line it had.
func TestStatusTextPlan(t *testing.T) {
	base := runs.Status{Step: 1200, TokensPerSec: 30000, Loss: 1.5, GradNorm: 0.8, ValBitsPerChar: math.NaN(), BestBitsPerChar: math.NaN(), ETA: 5 * time.Minute}
	tests := []struct {
		name string
		set  func(*runs.Status)
		want string // the part after "| 5m0s left"
		not  string
	}{
		{"no plan", func(*runs.Status) {}, "", "planned end"},
		{"on time", func(s *runs.Status) { s.PlannedSteps, s.PlanSlack, s.PlanSlackKnown = 4000, 90*time.Second, true },
			" | planned end step 4,000, on time (1m30s spare) | ", ""},
		{"late", func(s *runs.Status) { s.PlannedSteps, s.PlanSlack, s.PlanSlackKnown = 4000, -2*time.Minute, true },
			" | planned end step 4,000, 2m0s late | ", ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			st := base
			tt.set(&st)
			got := statusText(st)
			if !strings.HasPrefix(got, "validation not measured yet | 5m0s left") || !strings.Contains(got, "tokens/s | training loss") {
				t.Errorf("got %q, want the layout kept", got)
			}
			if tt.want != "" && !strings.Contains(got, "5m0s left"+tt.want) {
				t.Errorf("got %q, want %q after the time left", got, tt.want)
			}
			if tt.not != "" && strings.Contains(got, tt.not) {
				t.Errorf("got %q, want no %q", got, tt.not)
			}
		})
	}
}

// TestTrainAnnealsToDeadline: weft train with --for and schedule =
// "cosine" without a length plans the end from the measured speed (the
// clock moves 1 s a step), ends there before the deadline and says so.
func TestTrainAnnealsToDeadline(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	clk := &fakeClock{t: time.Date(2026, 12, 1, 12, 0, 0, 0, time.Local)}
	withStepClock(t, clk, time.Second)
	runDir := filepath.Join(dir, "run")
	code, out, stderr := weftIn(t, clk.Now, "train", cfg, "--run", runDir, "--for", "2m",
		"--set", "training.schedule=\"cosine\"", "--set", "training.min_learning_rate=0.0001")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	p, err := runs.ReadPlan(runDir)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(stderr, "deadline plan:") || !strings.Contains(out, "planned end reached") ||
		!strings.Contains(out, "Planned end: step "+thousands(p.PlannedSteps)+", reached") || !strings.Contains(out, "(on time)") {
		t.Errorf("stdout %q, stderr %q: want the plan (step %d) announced and reached on time", out, stderr, p.PlannedSteps)
	}
	// Resumed with --replan after the plan was reached: nothing to do.
	code, out, stderr = weftIn(t, clk.Now, "train", cfg, "--run", runDir, "--for", "2m",
		"--set", "training.schedule=\"cosine\"", "--set", "training.min_learning_rate=0.0001")
	if code != 0 || !strings.Contains(stderr+out, "nothing to do: planned end reached") {
		t.Errorf("resumed finished run: exit %d, %q %q; want nothing to do", code, out, stderr)
	}
}

// TestConfigNewFit: --fit writes a run file that loads, sized for the
// corpus, and prints the expected figures; misuse exits 2 naming the flag.
func TestConfigNewFit(t *testing.T) {
	dir := t.TempDir()
	corpus := filepath.Join(dir, "log.txt")
	text := strings.Repeat("tug Marten berthed at pier four; pilot confirmed the salt cargo.\n", 300)
	if err := os.WriteFile(corpus, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := weftIn(t, nil, "config", "new", "--fit", "10m", "--corpus", corpus, "--cores", "2")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	r, err := configs.Parse(filepath.Join(dir, "fit.toml"), []byte(out), nil)
	if err != nil {
		t.Fatalf("the run file does not load: %v\n%s", err, out)
	}
	if r.Data.Files[0] != corpus || r.Model.Cell != "lstm" {
		t.Errorf("cell %q, files %v; want an LSTM on %s", r.Model.Cell, r.Data.Files, corpus)
	}
	for _, want := range []string{"tokens per parameter", "passes over the", "tokens/s", "sized for 10m0s on 2 cores", "measured the reference model"} {
		if !strings.Contains(stderr, want) {
			t.Errorf("stderr %q lacks %q", stderr, want)
		}
	}
	// With --speed nothing is timed, and the rule follows that speed (the
	// measured one above depends on the machine and its load). The corpus
	// allows fewer parameters than the smallest size has, so 1×128 it is;
	// it runs about a third of the reference model's time per token, so at
	// 100,000 tokens/s it expects about 150 M tokens in the budget less
	// the margin (annealing), at 1,000 tokens/s about 1.5 M (a constant
	// rate: under configs' 8 M).
	for speed, sched := range map[string]string{"100000": "cosine", "1000": "constant"} {
		code, out, stderr := weftIn(t, nil, "config", "new", "--fit", "10m", "--corpus", corpus, "--cores", "2", "--speed", speed)
		r, err := configs.Parse(filepath.Join(dir, "fit.toml"), []byte(out), nil)
		if err != nil {
			t.Errorf("--speed %s: exit %d, %q: the run file does not load: %v", speed, code, stderr, err)
			continue
		}
		if code != 0 || strings.Contains(stderr, "measured") || !strings.Contains(stderr, "lstm 1×128") || r.Training.Schedule != sched {
			t.Errorf("--speed %s: exit %d, %q, schedule %q; want lstm 1×128 with schedule %q, and no timing", speed, code, stderr, r.Training.Schedule, sched)
		}
	}
	for _, tt := range []struct {
		args []string
		want string
	}{
		{[]string{"config", "new", "--fit", "10m"}, "--corpus"},
		{[]string{"config", "new", "char-small", "--fit", "10m", "--corpus", corpus}, "no preset"},
		{[]string{"config", "new", "--fit", "10m", "--corpus", corpus, "--cores", "0"}, "--cores"},
		{[]string{"config", "new", "--fit", "10m", "--corpus", corpus, "--tokenizer", "bpe"}, "--tokenizer"},
		{[]string{"config", "new", "--fit", "10m", "--corpus", corpus, "--speed", "-5"}, "--speed"},
		{[]string{"config", "new", "--fit", "10m", "--corpus", corpus, "--speed", "NaN"}, "--speed"},
	} {
		code, _, stderr := weftIn(t, nil, tt.args...)
		if code != 2 || !strings.Contains(stderr, tt.want) {
			t.Errorf("%v: exit %d, %q; want 2 naming %s", tt.args, code, stderr, tt.want)
		}
	}
}
