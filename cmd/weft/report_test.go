package main

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"weft/checkpoint/runs"
	"weft/checkpoint/runs/report"
	"weft/rnn"
)

const reloadTag = `<meta http-equiv="refresh" content="60">`

// TestReportDuringTraining checks that weft train keeps the page: live
// (reloading, saying so) at a validation, ended (not reloading, saying
// how) at the end, with the divergence recovery heard on the way.
func TestReportDuringTraining(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	page := report.PagePath(runDir)
	old := trainStepHook
	t.Cleanup(func() { trainStepHook = old })
	var live []byte
	poisoned := false
	trainStepHook = func(step int64, net *rnn.Model[float32]) {
		if step == 13 && !poisoned {
			poisoned = true
			net.Params()[1].Value[0] = float32(math.NaN())
		}
		if step == 30 { // after the validation at step 25
			live, _ = os.ReadFile(page)
		}
	}
	code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "40", "--set", "checkpoint.every_steps=10")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if live == nil {
		t.Fatal("no page during training at step 30")
	}
	for _, want := range []string{reloadTag, "reloads itself every minute", `id="fig-curve-tokens"`} {
		if !strings.Contains(string(live), want) {
			t.Errorf("the live page lacks %q", want)
		}
	}
	end, err := os.ReadFile(page)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(end), reloadTag) {
		t.Error("the page of the ended run still reloads")
	}
	for _, want := range []string{"step budget reached (training.max_steps = 40) at step 40", "no longer reloads", "restored an earlier state 1 time(s)"} {
		if !strings.Contains(string(end), want) {
			t.Errorf("the ended page lacks %q", want)
		}
	}
	st, err := report.ReadStatus(runDir)
	if err != nil || st == nil {
		t.Fatalf("status: %v, %v", st, err)
	}
	if st.State != report.StateEnded || len(st.Events) != 1 || !st.Events[0].Recovery {
		t.Errorf("status %+v; want ended with one recovery", st)
	}

	// While another process holds the run directory, weft report draws
	// what the files hold and says where the rest comes from.
	lock, err := runs.Lock(runDir)
	if err != nil {
		t.Fatal(err)
	}
	code, _, stderr = weftIn(t, nil, "report", "--run", runDir)
	lock.Unlock()
	if code != exitOK {
		t.Fatalf("report on a held run: exit %d: %s", code, stderr)
	}
	held, _ := os.ReadFile(page)
	if !strings.Contains(string(held), "while no other process holds the run directory") || strings.Contains(string(held), `id="shade-0"`) {
		t.Error("the page of a held run should leave out the surprisal view and say why")
	}

	// A restart is a new run: the old recovery is not its.
	trainStepHook = nil
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--restart", "--steps", "10"); code != exitOK {
		t.Fatalf("restart: exit %d: %s", code, stderr)
	}
	if st, err := report.ReadStatus(runDir); err != nil || st == nil || len(st.Events) != 0 {
		t.Errorf("status after --restart: %+v, %v; want no events", st, err)
	}
}

// TestReportWordRun trains a word model, compares it with the baselines
// and checks that weft report draws every element for it; then --stretch
// out of range and --compare.
func TestReportWordRun(t *testing.T) {
	skipInShort(t)
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	b, err := os.ReadFile(cfg)
	if err != nil {
		t.Fatal(err)
	}
	src := strings.Replace(string(b), `tokenizer = "char"`, `tokenizer = "word"`, 1) + `
[evaluation]
ngram_orders = [1, 3]
ngram_smoothers = ["kneser_ney"]
markov_orders = [1]
hmm_states = [4]
hmm_max_iterations = 3
bootstrap_samples = 100
bootstrap_block_chars = 200
`
	src = strings.Replace(src, "[evaluation]\nevery_steps = 25\n", "", 1)
	src = strings.Replace(src, "[evaluation]\n", "[evaluation]\nevery_steps = 25\n", 1)
	if err := os.WriteFile(cfg, []byte(src), 0o644); err != nil {
		t.Fatal(err)
	}
	runDir := filepath.Join(dir, "words")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "50"); code != exitOK {
		t.Fatalf("train: exit %d: %s", code, stderr)
	}
	if code, _, stderr := weftIn(t, nil, "eval", "--run", runDir); code != exitOK {
		t.Fatalf("eval: exit %d: %s", code, stderr)
	}
	code, out, stderr := weftIn(t, nil, "report", "--run", runDir)
	if code != exitOK {
		t.Fatalf("report: exit %d: %s", code, stderr)
	}
	if want := "report: " + report.PagePath(runDir) + "\n"; out != want {
		t.Errorf("stdout %q, want %q", out, want)
	}
	page, err := os.ReadFile(report.PagePath(runDir))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		`id="fig-curve-tokens"`, `id="fig-curve-time"`, `id="fig-learning-rate"`, `id="fig-grad-norm"`,
		`id="fig-comparison"`, `id="fig-frequency-bands"`, `id="shade-0"`, `id="shade-1"`, `id="shade-2"`,
		"the block whose bits per character is the median", "the model&#39;s top five",
		"Generated at temperature 0.7", "Generated at temperature 1", "Generated text can be wrong, nonsensical or offensive",
		"Resolved run file", "out of vocabulary", "Leakage", "Every row, best first",
	} {
		if !strings.Contains(string(page), want) {
			t.Errorf("the word run's page lacks %q", want)
		}
	}
	if strings.Contains(string(page), reloadTag) {
		t.Error("the page of a finished run reloads")
	}
	if strings.Contains(string(page), "http:") || strings.Contains(string(page), "https:") {
		t.Error("the page holds a URL")
	}

	code, _, stderr = weftIn(t, nil, "report", "--run", runDir, "--stretch", "999")
	if code != exitUsage || !strings.Contains(stderr, "--stretch 999: the test split has") {
		t.Errorf("--stretch 999: exit %d, stderr %q; want %d and the number of blocks", code, stderr, exitUsage)
	}

	// Two runs on one page: the word run and a character run.
	charDir := filepath.Join(dir, "chars")
	if code, _, stderr := weftIn(t, nil, "train", tinyRun(t, t.TempDir()), "--run", charDir, "--steps", "30"); code != exitOK {
		t.Fatalf("train: exit %d: %s", code, stderr)
	}
	both := filepath.Join(dir, "both.html")
	if code, _, stderr := weftIn(t, nil, "report", "--compare", runDir, charDir, "--out", both); code != exitOK {
		t.Fatalf("report --compare: exit %d: %s", code, stderr)
	}
	cmp, err := os.ReadFile(both)
	if err != nil {
		t.Fatal(err)
	}
	// The word run has a held-out score, so it comes first.
	w, c := strings.Index(string(cmp), "<td>words</td>"), strings.Index(string(cmp), "<td>chars</td>")
	if w < 0 || c < 0 || w > c {
		t.Errorf("standings: words at %d, chars at %d; want both, words first", w, c)
	}
	if !strings.Contains(string(cmp), `id="fig-compare-tokens"`) || !strings.Contains(string(cmp), `id="fig-compare-time"`) {
		t.Error("the comparison page lacks its curves")
	}

	for _, args := range [][]string{{"report"}, {"report", "--compare"}, {"report", "--run", runDir, charDir}, {"report", "--run", runDir, "--compare", charDir}} {
		if code, _, _ := weftIn(t, nil, args...); code != exitUsage {
			t.Errorf("%q: exit %d, want %d", args, code, exitUsage)
		}
	}
}
