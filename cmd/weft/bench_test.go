package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"testing"

	"weft/rnn"
	"weft/rnn/bench"
)

func TestBenchFlags(t *testing.T) {
	var got *benchOptions
	cmd := newBenchCmd(&deps{}, func(o *benchOptions) error { got = o; return nil })
	cmd.SetArgs([]string{"run.toml", "--set", "model.cell=gru", "--set", "training.batch_size=8",
		"--vocab", "500", "--windows", "7", "--warmup", "1", "--threads", "2", "--json"})
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	if got.Config != "run.toml" || !slices.Equal(got.Set, []string{"model.cell=gru", "training.batch_size=8"}) ||
		got.Vocab != 500 || got.Windows != 7 || got.Warmup != 1 || got.Threads != 2 || !got.JSON {
		t.Errorf("parsed %+v", got)
	}
	got = nil
	cmd = newBenchCmd(&deps{}, func(o *benchOptions) error { got = o; return nil })
	cmd.SetArgs(nil)
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	// Without --threads the run file's training.threads decides (-1).
	if got.Config != "" || got.Vocab != 96 || got.Windows != 20 || got.Warmup != 2 || got.Threads != -1 || got.JSON {
		t.Errorf("defaults: parsed %+v", got)
	}
}

func TestBenchUsageErrors(t *testing.T) {
	for _, args := range [][]string{
		{"bench", "--windows", "0"},
		{"bench", "--vocab", "0"},
		{"bench", "--warmup", "-1"},
		{"bench", "a.toml", "b.toml"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage || !strings.HasPrefix(stderr, "weft: ") {
			t.Errorf("%v: got exit %d stderr %q, want exit %d and a weft: message", args, code, stderr, exitUsage)
		}
	}
	code, _, stderr := runCmd(t, "", "bench", "--set", "model.hidden_size=0")
	if code != exitUsage || !strings.Contains(stderr, "--set model.hidden_size=0") {
		t.Errorf("bad --set: got exit %d stderr %q, want exit 2 naming the override (issue 12)", code, stderr)
	}
}

// TestBenchJSON runs a tiny bench and checks its JSON: the keys scripts
// read, the resolved shape, the token count (B·T per timed window), positive
// speeds, phases within the timed total, and a first-window loss near ln V
// (uniform tokens; an untrained model predicts about uniformly).
func TestBenchJSON(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "run.toml")
	src := "[data]\nfiles = [\"absent.txt\"]\n[model]\ncell = \"gru\"\nlayers = 2\nhidden_size = 16\nembedding_size = 8\n[training]\nbatch_size = 4\nunroll_steps = 8\n"
	if err := os.WriteFile(path, []byte(src), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := runCmd(t, "", "bench", path, "--set", "model.hidden_size=12", "--vocab", "20",
		"--windows", "2", "--warmup", "0", "--threads", "1", "--json")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var keys map[string]any
	if err := json.Unmarshal([]byte(out), &keys); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	for _, k := range []string{"tokens_per_second", "gflops_per_second", "peak_rss_bytes", "model", "phase_seconds", "flop_formula"} {
		if _, ok := keys[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	var rep bench.Report
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	// Parameters, by the tensor table of rnn/doc.go (G = 3·12 = 36):
	// embedding 20·8 = 160; layer 0: 36·8 + 36·12 + 36 + 12 = 768;
	// layer 1: 36·12 + 36·12 + 36 + 12 = 912; output 20·12 + 20 = 260.
	wantShape := bench.Shape{Cell: "gru", Layers: 2, Vocab: 20, Embedding: 8, Hidden: 12, Batch: 4, Unroll: 8,
		Threads: 1, Optimizer: "adam", DType: "float32", Parameters: 160 + 768 + 912 + 260, Output: "full"}
	if rep.Model != wantShape {
		t.Errorf("model: got %+v, want %+v", rep.Model, wantShape)
	}
	if rep.Tokens != 2*4*8 {
		t.Errorf("tokens: got %d, want %d (2 windows of 4×8)", rep.Tokens, 2*4*8)
	}
	if !(rep.TokensPerSecond > 0 && rep.GFLOPsPerSecond > 0 && rep.Seconds > 0 && rep.FLOPPerToken > 0) {
		t.Errorf("got %v tokens/s, %v GFLOP/s, %v s, %v FLOP per token, want all positive",
			rep.TokensPerSecond, rep.GFLOPsPerSecond, rep.Seconds, rep.FLOPPerToken)
	}
	if runtime.GOOS == "linux" || runtime.GOOS == "darwin" {
		if rep.PeakRSSBytes <= 0 {
			t.Errorf("peak_rss_bytes %d, want positive on %s", rep.PeakRSSBytes, runtime.GOOS)
		}
	}
	var sum float64
	for p := range rnn.NumPhases {
		s, ok := rep.PhaseSeconds[p.String()]
		if !ok || !(s > 0) {
			t.Errorf("phase %s: got %v (present %v), want a positive time", p, s, ok)
		}
		sum += s
	}
	if sum > rep.Seconds {
		t.Errorf("phases sum to %v s, more than the %v s of the timed windows", sum, rep.Seconds)
	}
	// A uniform prediction over V = 20 has cross-entropy ln 20 ≈ 3.00 nats
	// (common practice); two Adam steps from a small initialisation stay
	// near it.
	if rep.FinalLoss < 2.5 || rep.FinalLoss > 3.5 {
		t.Errorf("final loss %v nats, want about ln 20 = 3.00", rep.FinalLoss)
	}

	code, text, stderr := runCmd(t, "", "bench", "--set", "model.hidden_size=8", "--set", "model.embedding_size=4",
		"--set", "training.batch_size=2", "--set", "training.unroll_steps=4", "--windows", "1", "--threads", "1")
	if code != exitOK {
		t.Fatalf("text output: exit %d: %s", code, stderr)
	}
	for _, want := range []string{"tokens/s", "GFLOP/s", "6 × (E·G + H·G + H·V)", "recurrence", "peak resident"} {
		if !strings.Contains(text, want) {
			t.Errorf("text output lacks %q:\n%s", want, text)
		}
	}
}

// TestPeakRSSUnits touches 64 MiB and checks that the peak resident size
// is at least that: a kibibyte count read as bytes (the Linux unit of
// ru_maxrss, getrusage(2)) would fall short by 1024×.
func TestPeakRSSUnits(t *testing.T) {
	if runtime.GOOS != "linux" && runtime.GOOS != "darwin" {
		t.Skip("getrusage not read on", runtime.GOOS)
	}
	const size = 64 << 20
	buf := make([]byte, size)
	for i := range buf {
		buf[i] = byte(i)
	}
	rss, ok := peakRSS()
	if !ok || rss < size {
		t.Errorf("peak RSS %d bytes (ok %v) after touching %d bytes, want at least that", rss, ok, size)
	}
	if rss > 1<<40 {
		t.Errorf("peak RSS %d bytes, implausibly large (bytes counted as kibibytes?)", rss)
	}
	runtime.KeepAlive(buf)
}

// TestBenchSweep runs a tiny --sweep-threads sweep (16 threads exercise
// every per-thread path even on 2 cores) and checks its JSON: one point per
// count in order, speed-ups relative to the first, the fastest count, the
// default count of rnn.ChooseThreads, and the usage errors.
func TestBenchSweep(t *testing.T) {
	var got *benchOptions
	cmd := newBenchCmd(&deps{}, func(o *benchOptions) error { got = o; return nil })
	cmd.SetArgs([]string{"--sweep-threads", "1,4", "--threads-sweep"})
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	if !got.Sweep || !slices.Equal(got.SweepThreads, []int{1, 4}) {
		t.Errorf("parsed %+v", got)
	}

	code, out, stderr := runCmd(t, "", "bench", "--set", "model.hidden_size=8", "--set", "model.embedding_size=4",
		"--set", "training.batch_size=2", "--set", "training.unroll_steps=4", "--windows", "2", "--warmup", "1",
		"--sweep-threads", "1,2,16", "--json")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var sw bench.Sweep
	if err := json.Unmarshal([]byte(out), &sw); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	if len(sw.Points) != 3 {
		t.Fatalf("got %d points, want 3", len(sw.Points))
	}
	best := sw.Points[0]
	for i, want := range []int{1, 2, 16} {
		p := sw.Points[i]
		if p.Threads != want || p.Report == nil || p.Report.Model.Threads != want {
			t.Errorf("point %d: got threads %d (report %v), want %d", i, p.Threads, p.Report != nil, want)
			continue
		}
		if !(p.TokensPerSecond > 0) || p.TokensPerSecond != p.Report.TokensPerSecond {
			t.Errorf("point %d: tokens/s %v, report %v", i, p.TokensPerSecond, p.Report.TokensPerSecond)
		}
		if want := p.TokensPerSecond / sw.Points[0].TokensPerSecond; !closeEnough(p.SpeedUp, want) {
			t.Errorf("point %d: speed-up %v, want %v", i, p.SpeedUp, want)
		}
		if p.TokensPerSecond > best.TokensPerSecond {
			best = p
		}
		// The same seed and windows at every count: the same loss, bit for
		// bit (results do not depend on the thread count).
		if p.Report.FinalLoss != sw.Points[0].Report.FinalLoss {
			t.Errorf("point %d: final loss %v, want %v (1 thread)", i, p.Report.FinalLoss, sw.Points[0].Report.FinalLoss)
		}
	}
	if sw.FastestThreads != best.Threads || sw.BaseThreads != 1 || sw.Cores != runtime.NumCPU() {
		t.Errorf("got fastest %d base %d cores %d, want %d 1 %d", sw.FastestThreads, sw.BaseThreads, sw.Cores, best.Threads, runtime.NumCPU())
	}
	r, err := benchRun("", []string{"model.hidden_size=8", "model.embedding_size=4", "training.batch_size=2"})
	if err != nil {
		t.Fatal(err)
	}
	if want := rnn.ChooseThreads(r.Model, 2, runtime.NumCPU()); sw.DefaultThreads != want {
		t.Errorf("default threads %d, want %d (rnn.ChooseThreads)", sw.DefaultThreads, want)
	}

	code, text, stderr := runCmd(t, "", "bench", "--set", "model.hidden_size=8", "--set", "model.embedding_size=4",
		"--set", "training.batch_size=2", "--set", "training.unroll_steps=4", "--windows", "1", "--warmup", "0",
		"--sweep-threads", "1,2")
	if code != exitOK {
		t.Fatalf("text: exit %d: %s", code, stderr)
	}
	for _, want := range []string{"threads", "tokens/s", "speed-up", "1.00×", "fastest", "training.threads = 0 takes"} {
		if !strings.Contains(text, want) {
			t.Errorf("text output lacks %q:\n%s", want, text)
		}
	}
	for _, args := range [][]string{
		{"bench", "--threads-sweep", "--threads", "2"},
		{"bench", "--sweep-threads", "1,0"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage || !strings.HasPrefix(stderr, "weft: ") {
			t.Errorf("%v: got exit %d stderr %q, want exit %d and a weft: message", args, code, stderr, exitUsage)
		}
	}
}

func closeEnough(a, b float64) bool { return math.Abs(a-b) <= 1e-12*math.Abs(b) }
