package main

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"weft/configs"
	"weft/data"
	"weft/eval"
	"weft/rnn"
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
			// Before rounding for print, the unit scorer itself: one piece
			// goes through the same LogProbs call and the same
			// eval.NewResult sum, so the bits are identical, not merely
			// close (a second implementation would show here).
			sc := &scorer{lm: r.Net, kind: "rnn", vocab: r.Vocab}
			var row scoreRow
			u := &unitScorer{cc: cmdContext{ctx: context.Background()}, sc: sc, maxChars: 1 << 20, skipText: -1,
				emit: func(r scoreRow) error { row = r; return nil }}
			u.start("x", 1)
			for _, id := range append(r.Vocab.Encode(nil, text), extra...) {
				if err := u.add(id, r.Vocab.Chars(id)); err != nil {
					t.Fatal(err)
				}
			}
			if err := u.end(); err != nil {
				t.Fatal(err)
			}
			if row.Bits != bits {
				t.Errorf("unit scorer: %v bits, eval %v", row.Bits, bits)
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

var sinkRow scoreRow

// BenchmarkScore measures scoring throughput (characters/s) of the
// reference LSTM (vocabulary 96, embedding 64, one layer of 256) through
// the unit scorer: 80-character lines each from a fresh state, or one
// document with its state carried through.
func BenchmarkScore(b *testing.B) {
	var chars strings.Builder
	for c := ' ' + 1; c < '~'; c++ { // 93 printable characters, space, unknown, line end: 96
		chars.WriteRune(c)
	}
	chars.WriteString(" \n")
	v, err := data.LearnVocab(context.Background(), strings.NewReader(chars.String()), "ascii", data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		b.Fatal(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.HiddenSize, cfg.EmbeddingSize, cfg.Layers = 256, 64, 1
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		b.Fatal(err)
	}
	if v.Len() != 96 {
		b.Fatalf("vocabulary of %d entries, want 96", v.Len())
	}
	rng := rand.New(rand.NewPCG(1, 1))
	const lineChars, lines = 80, 64
	var toks []int
	for i := 0; i < lines; i++ {
		for j := 0; j < lineChars-1; j++ {
			toks = append(toks, 2+rng.IntN(94))
		}
		toks = append(toks, v.Boundary())
	}
	for _, tc := range []struct {
		unit    string
		workers int
	}{{"line", 1}, {"line", 2}, {"document", 1}} {
		b.Run(fmt.Sprintf("lstm/vocab=96/embed=64/hidden=256/unit=%s/threads=%d", tc.unit, tc.workers), func(b *testing.B) {
			sc := &scorer{lm: net, kind: "rnn", vocab: v, workers: tc.workers}
			u := &unitScorer{cc: cmdContext{ctx: context.Background()}, sc: sc, maxChars: 1 << 20, keepText: tc.unit == "line",
				skipText: v.Boundary(), workers: tc.workers, emit: func(r scoreRow) error { sinkRow = r; return nil }}
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				u.start("bench", 1)
				for k, id := range toks {
					if err := u.add(id, 1); err != nil {
						b.Fatal(err)
					}
					if tc.unit == "line" && id == v.Boundary() && k+1 < len(toks) {
						if err := u.end(); err != nil {
							b.Fatal(err)
						}
						u.start("bench", 1)
					}
				}
				if err := u.end(); err != nil {
					b.Fatal(err)
				}
				if err := u.flush(); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.N*len(toks))/b.Elapsed().Seconds(), "chars/s")
		})
	}
}

func TestScoreBadInput(t *testing.T) {
	r := newDecodeRun(t, "line")
	file := writeTemp(t, "bad.txt", "the cat\nsat \xff\xfe on\n")
	code, out, stderr := runCmd(t, "", "score", "--run", r.Dir, file)
	if code != exitFailure || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, "bad.txt") {
		t.Errorf("invalid UTF-8: got exit %d stdout %q stderr %q, want exit 1 and one line naming the file", code, out, stderr)
	}
}

// TestScoreThreads checks that scoring several pieces at once gives the
// same bytes as one at a time, for lines, long lines in pieces, windows
// and documents.
func TestScoreThreads(t *testing.T) {
	r := newDecodeRun(t, "line")
	var b strings.Builder
	for i := 0; i < 30; i++ {
		b.WriteString([]string{"the cat sat on the mat.\n", "a dog\n", "\n", "the log met a cat and a dog on a mat.\n"}[i%4])
	}
	file := writeTemp(t, "in.txt", b.String())
	for _, args := range [][]string{
		{"--json"},
		{"--max-chars", "7"},
		{"--unit", "window", "--window", "11", "--top", "5"},
		{"--unit", "document", "--max-chars", "50"},
	} {
		_, want, _ := runCmd(t, "", append(append([]string{"score", "--run", r.Dir}, args...), file)...)
		for _, threads := range []string{"2", "3"} {
			code, got, stderr := runCmd(t, "", append(append([]string{"score", "--run", r.Dir, "--threads", threads}, args...), file)...)
			if code != exitOK || got != want {
				t.Errorf("%v --threads %s: exit %d %s, output differs from 1 thread:\n%s\nwant:\n%s", args, threads, code, stderr, got, want)
			}
		}
	}
}

// TestScoreBoundedBuffers checks that a long unit is held one piece at a
// time: after scoring a 3000-character line with pieces of 64 characters,
// no buffer grew past what one piece needs.
func TestScoreBoundedBuffers(t *testing.T) {
	r := newDecodeRun(t, "")
	const n, piece = 3000, 64
	var rows []scoreRow
	sc := &scorer{lm: r.Net, kind: "rnn", vocab: r.Vocab}
	u := &unitScorer{cc: cmdContext{ctx: context.Background()}, sc: sc, maxChars: piece, keepText: true, skipText: -1,
		emit: func(row scoreRow) error { rows = append(rows, row); return nil }}
	u.start("long", 1)
	id, _ := r.Vocab.ID("a")
	for i := 0; i < n; i++ {
		if err := u.add(id, 1); err != nil {
			t.Fatal(err)
		}
	}
	if err := u.end(); err != nil {
		t.Fatal(err)
	}
	if len(rows) != 1 || rows[0].Pieces != (n+piece-1)/piece || rows[0].Characters != n {
		t.Fatalf("got %+v, want one row of %d characters in %d pieces", rows, n, (n+piece-1)/piece)
	}
	if len(u.free) > 2 {
		t.Errorf("%d piece buffers kept, want at most 2", len(u.free))
	}
	for _, j := range u.free {
		if cap(j.tokens) > 2*piece || cap(j.logp) > 2*piece {
			t.Errorf("a piece buffer holds %d tokens and %d log-probabilities, want at most %d", cap(j.tokens), cap(j.logp), 2*piece)
		}
	}
	if got := len([]rune(rows[0].Text)); got != scoreTextLimit+1 {
		t.Errorf("text of %d runes, want the first %d and an ellipsis", got, scoreTextLimit)
	}
}

// TestEveryTokenizer runs both commands on a model of each tokenizer: a
// sample's token texts spell its text, and scoring counts every character
// of the input.
func TestEveryTokenizer(t *testing.T) {
	text := "the cat met the dog.\na mat sat on a log.\n"
	for _, tok := range []string{"char", "byte", "word", "bpe", "symbols"} {
		t.Run(tok, func(t *testing.T) {
			r := newDecodeRunTokens(t, tok, "line")
			code, out, stderr := runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the ", "--length", "15", "--seed", "3", "--json")
			if code != exitOK {
				t.Fatalf("sample: exit %d %s", code, stderr)
			}
			var rec sampleJSON
			if err := json.Unmarshal([]byte(out), &rec); err != nil {
				t.Fatal(err)
			}
			joined := ""
			for _, tk := range rec.Tokens {
				joined += tk.Text
			}
			if rec.Stop != "stop_string" && joined != rec.Text {
				t.Errorf("sample: tokens spell %q, text %q", joined, rec.Text)
			}
			code, out, stderr = runCmd(t, "", "score", "--run", r.Dir, "--json", writeTemp(t, "in.txt", text))
			if code != exitOK {
				t.Fatalf("score: exit %d %s", code, stderr)
			}
			rows := parseRows(t, out)
			chars := 0
			for _, row := range rows {
				chars += row.Characters
			}
			want := len(text)
			if tok == "symbols" { // spaces separate symbols and are not tokens
				want -= strings.Count(text, " ")
			}
			if len(rows) != 2 || chars != want {
				t.Errorf("score: %d rows with %d characters, want 2 rows with %d", len(rows), chars, want)
			}
		})
	}
}
