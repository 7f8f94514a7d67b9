package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unicode/utf8"
)

// TestBenchScore runs bench --score on a tiny model and a small text: the
// rounds, the line count and the scored tokens (a character model scores
// every character of every line, its line end included: the count of
// runes of the file, counted here independently), positive speeds, each
// ratio the quotient of its speeds, and the median within the range.
func TestBenchScore(t *testing.T) {
	dir := t.TempDir()
	text := "tide at 06:14, berth 3 clear\nhold: salt cod, rope\n\nPILOT ABOARD — 2 lots\nlast line without an end"
	file := filepath.Join(dir, "log.txt")
	if err := os.WriteFile(file, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	args := []string{"bench", "--set", "model.hidden_size=8", "--set", "model.embedding_size=4", "--set", "training.batch_size=2",
		"--set", "training.unroll_steps=4", "--windows", "2", "--warmup", "1", "--threads", "1", "--score", file, "--rounds", "3"}
	code, out, stderr := runCmd(t, "", append(args, "--json")...)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var rep benchScoreReport
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	// Lines: every line with text or an end; the empty line is one too.
	if rep.Lines != 5 || len(rep.Rounds) != 3 || rep.Model.Threads != 1 {
		t.Errorf("got %d lines, %d rounds, %d threads; want 5, 3, 1", rep.Lines, len(rep.Rounds), rep.Model.Threads)
	}
	chars := int64(utf8.RuneCountInString(text))
	for i, r := range rep.Rounds {
		if r.ScoreTokens != chars || r.ScoreCharacters != chars {
			t.Errorf("round %d: scored %d tokens and %d characters, want %d of each", i, r.ScoreTokens, r.ScoreCharacters, chars)
		}
		if r.TrainTokens != 2*2*4 { // windows × streams × steps
			t.Errorf("round %d: trained %d tokens, want 16", i, r.TrainTokens)
		}
		if !(r.TrainTokensPerSecond > 0 && r.ScoreTokensPerSecond > 0) {
			t.Errorf("round %d: speeds %v and %v, want positive", i, r.TrainTokensPerSecond, r.ScoreTokensPerSecond)
		}
		if want := r.ScoreTokensPerSecond / r.TrainTokensPerSecond; r.Ratio != want {
			t.Errorf("round %d: ratio %v, want %v", i, r.Ratio, want)
		}
	}
	if !(rep.RatioMin <= rep.RatioMedian && rep.RatioMedian <= rep.RatioMax) {
		t.Errorf("median %v outside [%v, %v]", rep.RatioMedian, rep.RatioMin, rep.RatioMax)
	}
	code, out, stderr = runCmd(t, "", args...)
	if code != exitOK {
		t.Fatalf("text output: exit %d: %s", code, stderr)
	}
	for _, want := range []string{"5 lines", "scoring / training", "median of 3 rounds"} {
		if !strings.Contains(out, want) {
			t.Errorf("text output lacks %q:\n%s", want, out)
		}
	}
}

func TestBenchScoreErrors(t *testing.T) {
	file := filepath.Join(t.TempDir(), "log.txt")
	if err := os.WriteFile(file, []byte("a line\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, args := range [][]string{
		{"bench", "--score", file, "--rounds", "0"},
		{"bench", "--score", file, "--vocab", "50"},
		{"bench", "--score", file, "--threads-sweep"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage || !strings.HasPrefix(stderr, "weft: ") {
			t.Errorf("%v: got exit %d stderr %q, want exit %d and a weft: message", args, code, stderr, exitUsage)
		}
	}
	missing := filepath.Join(t.TempDir(), "absent.log")
	code, _, stderr := runCmd(t, "", "bench", "--score", missing, "--set", "model.hidden_size=4")
	if code == exitOK || !strings.Contains(stderr, "absent.log") || strings.Count(stderr, "\n") != 1 {
		t.Errorf("missing file: got exit %d stderr %q, want an error line naming the file", code, stderr)
	}
}
