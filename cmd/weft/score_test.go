package main

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"weft/configs"
	"weft/data"
	"weft/eval"
)

// scoreTol bounds the difference between two sums of the same float64
// log-probabilities taken in different orders, relative to the total.
const scoreTol = 1e-9

func closeRel(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol*math.Max(1, math.Abs(want))
}

func writeTemp(t *testing.T, name, text string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func parseRows(t *testing.T, out string) []scoreRow {
	t.Helper()
	var rows []scoreRow
	for _, line := range strings.Split(strings.TrimSpace(out), "\n") {
		if line == "" {
			continue
		}
		var r scoreRow
		if err := json.Unmarshal([]byte(line), &r); err != nil {
			t.Fatalf("%v in %q", err, line)
		}
		rows = append(rows, r)
	}
	return rows
}

// evalBits is what the evaluation code gives text under lm: the total
// cross-entropy of eval.NewResult over lm.LogProbs of the encoded text.
func evalBits(t *testing.T, lm eval.LanguageModel, v *data.Vocab, text string, extra ...int) (bits, bpc float64) {
	t.Helper()
	seq := append(v.Encode(nil, text), extra...)
	lp := make([]float64, len(seq))
	if err := lm.LogProbs(context.Background(), lp, seq); err != nil {
		t.Fatal(err)
	}
	r := eval.NewResult(lm.Name(), "", "", lp, len([]rune(text)))
	return r.CrossEntropyBits, r.BitsPerChar
}

func TestScoreFlags(t *testing.T) {
	var got *scoreOptions
	cmd := newScoreCmd(&deps{}, func(o *scoreOptions) error { got = o; return nil })
	cmd.SetArgs([]string{"--run", "r", "--baseline", "hmm-4", "--unit", "window", "--window", "16", "--max-chars", "100", "--json", "--sort", "--top", "3", "a.log", "-"})
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	if got.Run != "r" || got.Baseline != "hmm-4" || got.Unit != "window" || got.Window != 16 || got.MaxChars != 100 ||
		!got.JSON || !got.Sort || got.Top != 3 || !slices.Equal(got.Files, []string{"a.log", "-"}) {
		t.Errorf("parsed %+v", got)
	}
	got = nil
	cmd = newScoreCmd(&deps{}, func(o *scoreOptions) error { got = o; return nil })
	cmd.SetArgs([]string{"--checkpoint", "m.ckpt", "x"})
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	if got.Unit != "line" || got.MaxChars != 65536 || got.Top != 0 || got.Sort {
		t.Errorf("defaults: parsed %+v", got)
	}
}

func TestScoreUsageErrors(t *testing.T) {
	r := newDecodeRun(t, "line")
	for _, args := range [][]string{
		{"score", "--run", r.Dir},
		{"score", "--run", r.Dir, "--unit", "page", "-"},
		{"score", "--run", r.Dir, "--unit", "window", "-"},
		{"score", "--run", r.Dir, "--window", "5", "-"},
		{"score", "--run", r.Dir, "--max-chars", "0", "-"},
		{"score", "--run", r.Dir, "--top", "-1", "-"},
		{"score", "--run", r.Dir, "-", "-"},
		{"score", "--baseline", "hmm-2", "-"},
		{"score", "--run", r.Dir, "--baseline", "no such model", "-"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage || !strings.HasPrefix(stderr, "weft: ") {
			t.Errorf("%v: got exit %d stderr %q, want %d", args, code, stderr, exitUsage)
		}
	}
}

func TestScoreGolden(t *testing.T) {
	r := newDecodeRun(t, "line")
	text := "the cat sat.\nthe\tdog\n\nZebra on a mat\nthe end"
	file := writeTemp(t, "input.txt", text)
	for _, tc := range []struct {
		name string
		args []string
	}{
		{"score-lines.golden", nil},
		{"score-lines-json.golden", []string{"--json"}},
		{"score-document.golden", []string{"--unit", "document"}},
		{"score-window.golden", []string{"--unit", "window", "--window", "9"}},
		{"score-top.golden", []string{"--top", "2"}},
		{"score-pieces.golden", []string{"--max-chars", "5", "--json"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, out, stderr := runCmd(t, "", append(append([]string{"score", "--run", r.Dir}, tc.args...), file)...)
			if code != exitOK {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			checkGolden(t, tc.name, strings.ReplaceAll(out, file, "input.txt"))
		})
	}
}

// TestScoreMatchesEval checks that score's totals are those of the
// evaluation code (eval.NewResult over the model's LogProbs) on the same
// text, for a run's model and for a baseline.
func TestScoreMatchesEval(t *testing.T) {
	for _, boundary := range []string{"", "line", "document"} {
		t.Run("boundary="+boundary, func(t *testing.T) {
			r := newDecodeRun(t, boundary)
			text := "the dog met a cat on the log.\nthe mat sat.\n"
			file := writeTemp(t, "in.txt", text)
			code, out, stderr := runCmd(t, "", "score", "--run", r.Dir, "--unit", "document", "--json", file)
			if code != exitOK {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			rows := parseRows(t, out)
			var extra []int
			if boundary == "document" { // the document end, as the corpus pipeline adds it
				extra = append(extra, r.Vocab.Boundary())
			}
			bits, bpc := evalBits(t, r.Net, r.Vocab, text, extra...)
			if len(rows) != 1 || !closeRel(rows[0].Bits, bits, 1e-6) || !closeRel(rows[0].BitsPerChar, bpc, 1e-6) || rows[0].Characters != len(text) {
				t.Errorf("got %+v, want bits %v bits/char %v characters %d", rows, bits, bpc, len(text))
			}
		})
	}
}

// TestScoreLinesIndependent checks the documented context rule: each line
// is scored from the start of a document, so its score is the score of the
// line alone, whatever comes before it.
func TestScoreLinesIndependent(t *testing.T) {
	r := newDecodeRun(t, "")
	lines := []string{"a cat sat.\n", "the dog met the log.\n", "on a mat"}
	_, out, _ := runCmd(t, "", "score", "--checkpoint", r.Ckpt, "--json", writeTemp(t, "in.txt", strings.Join(lines, "")))
	rows := parseRows(t, out)
	if len(rows) != 3 {
		t.Fatalf("got %d rows, want 3", len(rows))
	}
	for i, l := range lines {
		bits, _ := evalBits(t, r.Net, r.Vocab, l)
		if rows[i].Line != i+1 || !closeRel(rows[i].Bits, bits, 1e-6) || rows[i].Characters != len(l) || rows[i].Text != strings.TrimSuffix(l, "\n") {
			t.Errorf("line %d: got %+v, want %v bits alone", i+1, rows[i], bits)
		}
	}
	// The most surprising token is the one LogProbs gives the lowest
	// probability.
	seq := r.Vocab.Encode(nil, lines[1])
	lp := make([]float64, len(seq))
	r.Net.LogProbs(context.Background(), lp, seq)
	worst := 0
	for i := range lp {
		if lp[i] < lp[worst] {
			worst = i
		}
	}
	if rows[1].SurpriseOffset != worst || !closeRel(rows[1].SurpriseBits, -lp[worst]/math.Ln2, 1e-6) || rows[1].SurpriseToken != r.Vocab.Decode(seq[worst:worst+1]) {
		t.Errorf("surprise: got offset %d %v bits %q, want %d %v", rows[1].SurpriseOffset, rows[1].SurpriseBits, rows[1].SurpriseToken, worst, -lp[worst]/math.Ln2)
	}
}

// TestScoreLongLinePieces checks that a line longer than --max-chars is
// scored as consecutive pieces, each from a fresh state, and marked.
func TestScoreLongLinePieces(t *testing.T) {
	r := newDecodeRun(t, "")
	line := "the cat sat on the mat and the dog sat on the log\n" // 50 characters
	_, out, _ := runCmd(t, "", "score", "--checkpoint", r.Ckpt, "--json", "--max-chars", "20", writeTemp(t, "in.txt", line))
	rows := parseRows(t, out)
	var want float64
	for _, p := range []string{line[:20], line[20:40], line[40:]} {
		b, _ := evalBits(t, r.Net, r.Vocab, p)
		want += b
	}
	if len(rows) != 1 || rows[0].Pieces != 3 || rows[0].Characters != 50 || !closeRel(rows[0].Bits, want, 1e-6) {
		t.Errorf("got %+v, want 3 pieces, 50 characters, %v bits", rows, want)
	}
}

func TestScoreWindows(t *testing.T) {
	r := newDecodeRun(t, "")
	text := "the cat\nsat on the mat.\n"
	_, out, _ := runCmd(t, "", "score", "--checkpoint", r.Ckpt, "--json", "--unit", "window", "--window", "10", writeTemp(t, "in.txt", text))
	rows := parseRows(t, out)
	wantLines := []int{1, 2, 2}
	if len(rows) != 3 {
		t.Fatalf("got %d windows, want 3 (24 characters in windows of 10)", len(rows))
	}
	for i, w := range []string{text[:10], text[10:20], text[20:]} {
		b, _ := evalBits(t, r.Net, r.Vocab, w)
		if !closeRel(rows[i].Bits, b, 1e-6) || rows[i].Line != wantLines[i] || rows[i].Text != w {
			t.Errorf("window %d: got %+v, want %v bits, line %d, text %q", i, rows[i], b, wantLines[i], w)
		}
	}
}

func TestScoreTopAndSort(t *testing.T) {
	r := newDecodeRun(t, "line")
	var b strings.Builder
	for i := 0; i < 40; i++ {
		b.WriteString([]string{"the cat sat.\n", "zzq\n", "a dog on a log.\n", "tt\n", "mat\n"}[i%5])
	}
	file := writeTemp(t, "in.txt", b.String())
	_, all, _ := runCmd(t, "", "score", "--run", r.Dir, "--json", "--sort", file)
	_, top, _ := runCmd(t, "", "score", "--run", r.Dir, "--json", "--top", "7", file)
	_, plain, _ := runCmd(t, "", "score", "--run", r.Dir, "--json", file)
	sorted, kept, unsorted := parseRows(t, all), parseRows(t, top), parseRows(t, plain)
	if len(sorted) != 40 || len(unsorted) != 40 || len(kept) != 7 {
		t.Fatalf("got %d sorted, %d top, %d plain rows", len(sorted), len(kept), len(unsorted))
	}
	for i := 1; i < len(sorted); i++ {
		if sorted[i].BitsPerChar > sorted[i-1].BitsPerChar {
			t.Fatalf("--sort: row %d (%v) above row %d (%v)", i, sorted[i].BitsPerChar, i-1, sorted[i-1].BitsPerChar)
		}
	}
	for i := range kept {
		if kept[i] != sorted[i] {
			t.Errorf("--top 7 row %d: %+v, --sort gives %+v", i, kept[i], sorted[i])
		}
	}
	// The plain rows are in input order, the same rows.
	for i := range unsorted {
		if unsorted[i].Line != i+1 {
			t.Fatalf("row %d has line %d", i, unsorted[i].Line)
		}
	}
}

func TestScoreEmptyInput(t *testing.T) {
	r := newDecodeRun(t, "line")
	code, out, stderr := runCmd(t, "", "score", "--run", r.Dir, "-")
	if code != exitOK || !strings.HasPrefix(out, "source\tline\t") || strings.Count(out, "\n") != 1 || !strings.Contains(stderr, "no text to score") {
		t.Errorf("got exit %d stdout %q stderr %q, want the header alone and a note", code, out, stderr)
	}
	code, out, _ = runCmd(t, "", "score", "--run", r.Dir, "--json", writeTemp(t, "empty.txt", ""))
	if code != exitOK || out != "" {
		t.Errorf("--json: got exit %d stdout %q, want nothing", code, out)
	}
	code, _, stderr = runCmd(t, "", "score", "--run", r.Dir, filepath.Join(r.Dir, "missing.txt"))
	if code != exitFailure || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, "missing.txt") {
		t.Errorf("missing file: got exit %d stderr %q", code, stderr)
	}
}

// TestScoreBaseline scores with fitted baselines saved in the run's
// baselines folder, and checks the totals against the baseline's own
// LogProbs through eval.NewResult.
func TestScoreBaseline(t *testing.T) {
	r := newDecodeRun(t, "line")
	train := r.Vocab.Encode(nil, decodeCorpus)
	dir := filepath.Join(r.Dir, baselinesDir)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	c, err := eval.CountNGrams(train, r.Vocab.Len(), 3, r.Vocab.Boundary(), nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := eval.SaveCounts(filepath.Join(dir, baselineCounts), c); err != nil {
		t.Fatal(err)
	}
	h, err := eval.TrainHMM(context.Background(), train, r.Vocab.Len(), eval.HMMOptions{States: 2, MaxIterations: 3, Seed: 1, Boundary: r.Vocab.Boundary()})
	if err != nil {
		t.Fatal(err)
	}
	if err := eval.SaveHMM(filepath.Join(dir, "hmm-2.bin"), h); err != nil {
		t.Fatal(err)
	}
	run := configs.Default()
	run.Data.Files = []string{"corpus.txt"}
	rc, err := configs.Encode(&run)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(r.Dir, runConfigFile), rc, 0o644); err != nil {
		t.Fatal(err)
	}
	kn, _ := eval.NewNGram(c, 3, eval.Smoothing{Method: eval.KneserNey})
	mk, _ := eval.NewMarkovChain(c, 1, configs.Default().Evaluation.AddK)
	text := "the cat met a dog.\n"
	file := writeTemp(t, "in.txt", text)
	for _, tc := range []struct {
		name string
		lm   eval.LanguageModel
	}{{"3-gram kneser_ney", kn}, {"markov-1", mk}, {"hmm-2", h}} {
		code, out, stderr := runCmd(t, "", "score", "--run", r.Dir, "--baseline", tc.name, "--json", file)
		if code != exitOK {
			t.Fatalf("%s: exit %d %s", tc.name, code, stderr)
		}
		rows := parseRows(t, out)
		bits, _ := evalBits(t, tc.lm, r.Vocab, text)
		if len(rows) != 1 || !closeRel(rows[0].Bits, bits, 1e-6) {
			t.Errorf("%s: got %+v, want %v bits", tc.name, rows, bits)
		}
	}
	code, _, stderr := runCmd(t, "", "score", "--run", r.Dir, "--baseline", "hmm-9", file)
	if code != exitFailure || !strings.Contains(stderr, "9-state") {
		t.Errorf("missing HMM: got exit %d stderr %q", code, stderr)
	}
}
