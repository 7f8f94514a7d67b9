package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/spf13/cobra"
)

// Tests of the command-line behaviours issue 12 asks for: messages that
// point at the right place, and what a new user trips over.

func TestSetErrorsNameTheOverride(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	for _, tc := range []struct {
		set, want string
	}{
		{"model.hidden_size=abc", "weft: --set model.hidden_size=abc: want an integer, got a string\n"},
		{"training.learning_rate=0", "weft: --set training.learning_rate=0: must be a positive number, got 0\n"},
	} {
		code, _, stderr := weftIn(t, nil, "train", cfg, "--run", filepath.Join(dir, "run"), "--set", tc.set)
		if code != exitUsage || !strings.HasPrefix(stderr, tc.want) || strings.Contains(stderr, "run.toml:") {
			t.Errorf("--set %s: got exit %d stderr %q, want exit 2 and %q", tc.set, code, stderr, tc.want)
		}
	}
}

func TestUnknownCommandOneSentence(t *testing.T) {
	code, _, stderr := runCmd(t, "", "trian")
	want := "weft: unknown command \"trian\" for \"weft\"; did you mean train?\n"
	if code != exitUsage || !strings.HasPrefix(stderr, want) {
		t.Errorf("got exit %d stderr %q, want %q", code, stderr, want)
	}
}

// TestPrepareThenBaselines: a directory prepared with --run is a run
// directory the other verbs accept.
func TestPrepareThenBaselines(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "prepare", cfg, "--run", run); code != exitOK {
		t.Fatalf("prepare: exit %d %s", code, stderr)
	}
	code, out, stderr := weftIn(t, nil, "baselines", run, "--set", "evaluation.hmm_states=[]", "--set", "evaluation.ngram_orders=[1,2]")
	if code != exitOK || !strings.Contains(out, "2-gram") {
		t.Errorf("baselines after prepare: exit %d stdout %q stderr %q", code, out, stderr)
	}
	// One mode for every file of the run (vocab.json and tokens.bin were
	// 0600, the others 0644).
	var modes = map[os.FileMode][]string{}
	for _, name := range []string{"run.toml", "vocab.json", "tokens.bin", "split.json"} {
		fi, err := os.Stat(filepath.Join(run, name))
		if err != nil {
			t.Fatal(err)
		}
		modes[fi.Mode().Perm()] = append(modes[fi.Mode().Perm()], name)
	}
	if len(modes) != 1 {
		t.Errorf("files of the run have different modes: %v", modes)
	}
}

func TestQuietPrintsSummaryAndOneBudget(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	code, out, stderr := weftIn(t, nil, "train", cfg, "--run", filepath.Join(dir, "run"), "--steps", "5", "--quiet")
	if code != exitOK || !strings.HasPrefix(out, "step budget reached (training.max_steps = 5) at step 5") || stderr != "" {
		t.Errorf("--quiet: exit %d stdout %q stderr %q, want the final summary and nothing else", code, out, stderr)
	}
	_, _, stderr = weftIn(t, nil, "train", cfg, "--run", filepath.Join(dir, "run2"), "--steps", "5")
	if !strings.Contains(stderr, "budget: 5 steps\n") {
		t.Errorf("one budget: stderr %q, want \"budget: 5 steps\" without \"whichever comes first\"", stderr)
	}
}

func TestModelLocationMessages(t *testing.T) {
	dir := t.TempDir()
	code, _, stderr := runCmd(t, "", "sample", "--run", filepath.Join(dir, "nope"))
	if code != exitFailure || !strings.Contains(stderr, "nope: no such file or directory") {
		t.Errorf("missing run directory: exit %d stderr %q", code, stderr)
	}
	code, _, stderr = runCmd(t, "", "sample", "--checkpoint", dir)
	if code != exitUsage || !strings.Contains(stderr, "is a directory; give a run directory with --run") {
		t.Errorf("--checkpoint DIR: exit %d stderr %q", code, stderr)
	}
}

// TestFailedTrainLeavesNothing: a first run that fails (an empty corpus)
// leaves no run directory behind.
func TestFailedTrainLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	if err := os.WriteFile(filepath.Join(dir, "corpus.txt"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	run := filepath.Join(dir, "run")
	if code, _, _ := weftIn(t, nil, "train", cfg, "--run", run); code != exitFailure {
		t.Fatalf("exit %d, want 1", code)
	}
	if _, err := os.Stat(run); !os.IsNotExist(err) {
		t.Errorf("the failed run left %s behind (%v)", run, err)
	}
}

// TestScoreTextIsTheInput: issue 12, the text column of weft score is the
// input's own line, byte for byte, even where the vocabulary lacks its
// characters.
func TestScoreTextIsTheInput(t *testing.T) {
	r := newDecodeRun(t, "line")
	lines := []string{"zzzz qqq 123", "the cat sat.", "Ünïcödé ☃ line"}
	code, out, stderr := runCmd(t, "", "score", "--run", r.Dir, "--json", writeTemp(t, "in.txt", strings.Join(lines, "\n")+"\n"))
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	rows := parseRows(t, out)
	if len(rows) != len(lines) {
		t.Fatalf("got %d rows", len(rows))
	}
	for i, row := range rows {
		if row.Text != lines[i] {
			t.Errorf("line %d: text %q, want %q", i+1, row.Text, lines[i])
		}
	}
}

// TestCompletion: issue 12, shell completion is on, and completes preset
// names, run-file keys for --set and directories for --run.
func TestCompletion(t *testing.T) {
	code, out, _ := runCmd(t, "", "completion", "bash")
	if code != exitOK || !strings.Contains(out, "bash completion") {
		t.Errorf("completion bash: exit %d, %d bytes", code, len(out))
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"__complete", "config", "new", ""}, "char-small\t"},
		{[]string{"__complete", "train", "x.toml", "--set", "training.max_s"}, "training.max_steps=\n:2\n"},
		{[]string{"__complete", "sample", "--run", ""}, ":16\n"}, // ShellCompDirectiveFilterDirs
	} {
		code, out, _ := runCmd(t, "", tc.args...)
		if code != exitOK || !strings.Contains(out, tc.want) {
			t.Errorf("%v: exit %d output %q, want %q", tc.args, code, out, tc.want)
		}
	}
}

// TestEveryVerbHasExamples: issue 12, every verb's help ends with
// examples, and they are the commands the README shows.
func TestEveryVerbHasExamples(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	root := newRootCmd(&deps{})
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		for _, sub := range c.Commands() {
			walk(sub)
		}
		if !c.Runnable() || c.Hidden || c == root || c.Name() == "help" || c.Parent().Name() == "completion" || c.Name() == "completion" {
			return
		}
		if strings.TrimSpace(c.Example) == "" {
			t.Errorf("%s: no examples in its help", c.CommandPath())
			return
		}
		for _, line := range strings.Split(c.Example, "\n") {
			if line = strings.TrimSpace(line); !strings.Contains(string(readme), line) {
				t.Errorf("%s: example %q is not in the README", c.CommandPath(), line)
			}
		}
	}
	walk(root)
}

// TestRunFlagEverywhere: issue 12, the run directory is --run DIR for
// baselines and inspect too; the positional forms still work with a line
// saying they go.
func TestRunFlagEverywhere(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", run, "--steps", "5", "--quiet"); code != exitOK {
		t.Fatalf("train: %s", stderr)
	}
	small := []string{"--set", "evaluation.hmm_states=[]", "--set", "evaluation.ngram_orders=[1,2]"}
	for _, tc := range []struct {
		args       []string
		deprecated bool
	}{
		{[]string{"inspect", "--run", run}, false},
		{[]string{"inspect", run}, true},
		{append([]string{"baselines", "--run", run}, small...), false},
		{append([]string{"baselines", run}, small...), true},
	} {
		code, out, stderr := weftIn(t, nil, tc.args...)
		if code != exitOK || out == "" {
			t.Errorf("%v: exit %d stderr %q", tc.args, code, stderr)
		}
		if got := strings.Contains(stderr, "is deprecated and goes in the next release; use"); got != tc.deprecated {
			t.Errorf("%v: deprecation line %v, want %v (stderr %q)", tc.args, got, tc.deprecated, stderr)
		}
	}
	if code, _, _ := weftIn(t, nil, "inspect"); code != exitUsage {
		t.Errorf("inspect with nothing: exit %d, want 2", code)
	}
}

// TestEvalRows: issue 12, weft eval lists the best of each family by
// default, every row with --all and the N best with --top N.
func TestEvalRows(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", run, "--steps", "5", "--quiet"); code != exitOK {
		t.Fatalf("train: %s", stderr)
	}
	ladder := []string{"--set", "evaluation.hmm_states=[]", "--set", "evaluation.ngram_orders=[1,2,3]",
		"--set", `evaluation.ngram_smoothers=["kneser_ney","witten_bell"]`, "--set", "evaluation.markov_orders=[1,2]", "--set", "output.plots=false"}
	// The table's rows: the lines after its header, up to the first that
	// is blank or a note in brackets.
	rowsOf := func(out string) int {
		_, body, _ := strings.Cut(out, "\nmodel ")
		lines := strings.Split(body, "\n")[1:]
		n := 0
		for _, l := range lines {
			if l == "" || strings.HasPrefix(l, "(") {
				break
			}
			n++
		}
		return n
	}
	for _, tc := range []struct {
		flags []string
		rows  int
		more  bool
	}{
		{nil, 5, true}, // recurrent, interpolated, best kneser_ney, best witten_bell, best markov
		{[]string{"--all"}, 10, false},
		{[]string{"--top", "3"}, 3, true},
	} {
		args := append(append([]string{"eval", "--run", run}, ladder...), tc.flags...)
		code, out, stderr := weftIn(t, nil, args...)
		if code != exitOK || rowsOf(out) != tc.rows || strings.Contains(out, "more rows: --all") != tc.more {
			t.Errorf("%v: exit %d, %d rows, want %d:\n%s%s", tc.flags, code, rowsOf(out), tc.rows, out, stderr)
		}
	}
}

// TestRunsList: issue 12, weft runs lists the run directories under a
// folder with their state, step and best validation.
func TestRunsList(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	for _, name := range []string{"a", "nested/b"} {
		if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", filepath.Join(dir, "runs", name), "--steps", "4", "--quiet"); code != exitOK {
			t.Fatalf("train: %s", stderr)
		}
	}
	code, out, stderr := weftIn(t, nil, "runs", filepath.Join(dir, "runs"))
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, want := range []string{"run", "state", "a ", "nested/b ", "finished", "at step 4"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if code, _, _ := weftIn(t, nil, "runs", filepath.Join(dir, "nope")); code != exitFailure {
		t.Errorf("missing folder: exit %d, want 1", code)
	}
}

// TestThreadsEverywhere: issue 12, --threads has one meaning (the threads
// the command computes with) on every verb that computes, train included.
func TestThreadsEverywhere(t *testing.T) {
	root := newRootCmd(&deps{})
	for _, verb := range []string{"train", "eval", "sample", "score", "bench"} {
		c, _, err := root.Find([]string{verb})
		if err != nil {
			t.Fatal(err)
		}
		f := c.Flags().Lookup("threads")
		if f == nil || !strings.HasPrefix(f.Usage, "threads to compute with") {
			t.Errorf("%s: --threads %v", verb, f)
		}
	}
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	run := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", run, "--steps", "3", "--threads", "2", "--quiet"); code != exitOK {
		t.Fatalf("train --threads 2: %s", stderr)
	}
	b, err := os.ReadFile(filepath.Join(run, "run.toml"))
	if err != nil || !strings.Contains(string(b), "threads = 2") {
		t.Errorf("run.toml does not record --threads 2: %v", err)
	}
}
