package main

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/modeltest"
	"weft/data"
	"weft/rnn"
)

var updateGolden = flag.Bool("update", false, "rewrite the golden files of weft sample and weft score")

// decodeCorpus is the training text of the test models.
const decodeCorpus = "the cat sat on the mat.\nthe dog sat on the log.\na cat and a dog met.\n"

// decodeRun is a run directory holding one small random LSTM over the
// characters of decodeCorpus, with a line boundary, saved as the run's best
// checkpoint, and the vocabulary file beside it.
type decodeRun struct {
	Dir   string
	Ckpt  string
	Net   *rnn.Model[float32]
	Vocab *data.Vocab
}

func newDecodeRun(t testing.TB, boundary string) *decodeRun {
	t.Helper()
	return newDecodeRunTokens(t, "char", boundary)
}

func newDecodeRunTokens(t testing.TB, tokenizer, boundary string) *decodeRun {
	t.Helper()
	m := modeltest.New(t, decodeCorpus, tokenizer, boundary)
	net, v := m.Net, m.Vocab
	f, err := checkpoint.NewModelFile(net, net.Config(), v, nil)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	ckdir := filepath.Join(dir, checkpointsDir)
	if err := os.MkdirAll(ckdir, 0o755); err != nil {
		t.Fatal(err)
	}
	path := checkpoint.BestPath(ckdir)
	if err := checkpoint.Save(path, f); err != nil {
		t.Fatal(err)
	}
	if err := v.WriteFile(filepath.Join(dir, data.VocabFile)); err != nil {
		t.Fatal(err)
	}
	return &decodeRun{Dir: dir, Ckpt: path, Net: net, Vocab: v}
}

// checkGolden compares got with testdata/name, or rewrites it with -update.
func checkGolden(t *testing.T, name, got string) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *updateGolden {
		if err := os.MkdirAll("testdata", 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if !sameUpToRounding(got, string(want)) {
		t.Errorf("output differs from %s (go test -update rewrites it)\ngot:\n%s\nwant:\n%s", path, got, want)
	}
}

// decimal matches the numbers printed with a decimal point; ids, counts
// and offsets are integers and must match exactly.
var decimal = regexp.MustCompile(`-?[0-9]+\.[0-9]+`)

// goldenAbsTol and goldenRelTol bound the difference allowed between a
// decimal of a golden file and the output. The model's float32 products
// may differ in the last bits between kernels (AVX-512, AVX2+FMA, the
// portable Go kernel: see package linalg), which moves a log-probability
// by about 1e-7 and can flip the last printed digit; everything else must
// match byte for byte.
const (
	goldenAbsTol = 2e-4
	goldenRelTol = 1e-5
)

// sameUpToRounding compares got with want, the decimals within the golden
// tolerances and the rest exactly.
func sameUpToRounding(got, want string) bool {
	if got == want {
		return true
	}
	gs, ws := decimal.Split(got, -1), decimal.Split(want, -1)
	if !slices.Equal(gs, ws) {
		return false
	}
	gn, wn := decimal.FindAllString(got, -1), decimal.FindAllString(want, -1)
	for i := range gn {
		a, _ := strconv.ParseFloat(gn[i], 64)
		b, _ := strconv.ParseFloat(wn[i], 64)
		if math.Abs(a-b) > goldenAbsTol+goldenRelTol*math.Abs(b) {
			return false
		}
	}
	return true
}

func TestSampleFlags(t *testing.T) {
	for _, tc := range []struct {
		args  []string
		check func(*sampleOptions) bool
	}{
		{[]string{"--run", "r"}, func(o *sampleOptions) bool {
			return o.Run == "r" && o.Length == "200" && o.Samples == 1 && o.Temperature == 1 && !o.SeedSet && !o.samplingSet && o.Beam == 0
		}},
		{[]string{"--checkpoint", "x.ckpt", "--prompt", "ab", "--length", "30c", "--samples", "3", "--seed", "9",
			"--temperature", "0.5", "--top-k", "4", "--top-p", "0.9", "--stop", "\n\n", "--stop", "END", "--json", "--map-unknown"},
			func(o *sampleOptions) bool {
				return o.Checkpoint == "x.ckpt" && o.Prompt == "ab" && o.Length == "30c" && o.Samples == 3 && o.Seed == 9 && o.SeedSet &&
					o.Temperature == 0.5 && o.TopK == 4 && o.TopP == 0.9 && len(o.Stop) == 2 && o.Stop[1] == "END" && o.JSON && o.MapUnknown && o.samplingSet
			}},
		{[]string{"--run", "r", "--beam", "5", "--prompt-file", "-"}, func(o *sampleOptions) bool {
			return o.Beam == 5 && o.PromptFile == "-"
		}},
	} {
		var got *sampleOptions
		cmd := newSampleCmd(&deps{}, func(o *sampleOptions) error { got = o; return nil })
		cmd.SetArgs(tc.args)
		if err := cmd.Execute(); err != nil {
			t.Fatalf("%v: %v", tc.args, err)
		}
		if got == nil || !tc.check(got) {
			t.Errorf("%v: parsed %+v", tc.args, got)
		}
	}
}

func TestSampleUsageErrors(t *testing.T) {
	r := newDecodeRun(t, "line")
	for _, args := range [][]string{
		{"sample"}, // no model
		{"sample", "--run", r.Dir, "--length", "0"},
		{"sample", "--run", r.Dir, "--length", "ten"},
		{"sample", "--run", r.Dir, "--samples", "0"},
		{"sample", "--run", r.Dir, "--temperature", "-1"},
		{"sample", "--run", r.Dir, "--top-p", "2"},
		{"sample", "--run", r.Dir, "--beam", "2", "--temperature", "0.5"},
		{"sample", "--run", r.Dir, "--beam", "2", "--samples", "3"},
		{"sample", "--run", r.Dir, "--prompt", "a", "--prompt-file", "f"},
		{"sample", "--run", r.Dir, "--stop", ""},
		{"sample", "--run", r.Dir, "extra"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage || !strings.HasPrefix(stderr, "weft: ") {
			t.Errorf("%v: got exit %d stderr %q, want %d and a weft: message", args, code, stderr, exitUsage)
		}
	}
}

func TestSampleGolden(t *testing.T) {
	r := newDecodeRun(t, "line")
	for _, tc := range []struct {
		name string
		args []string
	}{
		{"sample-text.golden", []string{"--prompt", "the ", "--length", "40", "--seed", "3", "--samples", "2"}},
		{"sample-json.golden", []string{"--prompt", "a cat", "--length", "12c", "--seed", "5", "--temperature", "0.8", "--top-k", "6", "--json"}},
		{"sample-greedy.golden", []string{"--prompt", "the d", "--length", "30", "--temperature", "0"}},
		{"sample-nucleus.golden", []string{"--length", "30", "--seed", "11", "--top-p", "0.8", "--samples", "3"}},
		{"sample-beam.golden", []string{"--prompt", "the ", "--length", "8", "--beam", "4", "--samples", "2", "--json"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, out, stderr := runCmd(t, "", append([]string{"sample", "--run", r.Dir}, tc.args...)...)
			if code != exitOK {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			checkGolden(t, tc.name, out)
		})
	}
}

// TestSampleDeterministic runs one seeded command twice, each with a new
// model load, and with 1 and 2 threads, and checks the bytes are equal; a
// different seed must change them.
func TestSampleDeterministic(t *testing.T) {
	r := newDecodeRun(t, "")
	args := []string{"sample", "--checkpoint", r.Ckpt, "--length", "60", "--seed", "77", "--samples", "3", "--json"}
	_, a, _ := runCmd(t, "", args...)
	_, b, _ := runCmd(t, "", args...)
	if a != b || a == "" {
		t.Fatalf("two runs with seed 77 differ:\n%s\n%s", a, b)
	}
	for _, threads := range []string{"1", "2"} {
		if _, c, _ := runCmd(t, "", append(args, "--threads", threads)...); c != a {
			t.Errorf("--threads %s changes the output:\n%s\nwant:\n%s", threads, c, a)
		}
	}
	args[len(args)-4] = "78"
	if _, c, _ := runCmd(t, "", args...); c == a {
		t.Errorf("seeds 77 and 78 gave the same output")
	}
}

func TestSampleJSONAgreesWithScoring(t *testing.T) {
	r := newDecodeRun(t, "")
	code, out, stderr := runCmd(t, "", "sample", "--checkpoint", r.Ckpt, "--prompt", "the c", "--length", "25", "--seed", "1", "--json")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var rec sampleJSON
	if err := json.Unmarshal([]byte(out), &rec); err != nil {
		t.Fatal(err)
	}
	if len(rec.Tokens) != 25 || rec.Stop != "length" {
		t.Fatalf("got %d tokens, stop %q; want 25 and length", len(rec.Tokens), rec.Stop)
	}
	// The per-token log-probabilities are those LogProbs gives the prompt
	// followed by the sample.
	seq := r.Vocab.Encode(nil, "the c")
	np := len(seq)
	text := ""
	for _, tk := range rec.Tokens {
		seq = append(seq, tk.ID)
		text += tk.Text
	}
	if text != rec.Text {
		t.Errorf("token texts join to %q, text is %q", text, rec.Text)
	}
	lp := make([]float64, len(seq))
	if err := r.Net.LogProbs(context.Background(), lp, seq); err != nil {
		t.Fatal(err)
	}
	var total float64
	for i, tk := range rec.Tokens {
		if math.Abs(lp[np+i]-tk.LogProb) > 2e-6 { // 1e-6 rounding plus float32 chunking
			t.Errorf("token %d: log-probability %v, LogProbs gives %v", i, tk.LogProb, lp[np+i])
		}
		total += lp[np+i]
	}
	if math.Abs(total-rec.LogProb) > 1e-4 || math.Abs(-total/math.Ln2-rec.Bits) > 1e-4 {
		t.Errorf("totals: got %v nats %v bits, want %v and %v", rec.LogProb, rec.Bits, total, -total/math.Ln2)
	}
}

func TestSampleStops(t *testing.T) {
	r := newDecodeRun(t, "line")
	// The boundary symbol ("line": the line end) ends a continuation.
	code, out, _ := runCmd(t, "", "sample", "--run", r.Dir, "--length", "400", "--seed", "2", "--samples", "5", "--json")
	if code != exitOK {
		t.Fatalf("exit %d", code)
	}
	boundaries := 0
	for _, line := range strings.Split(strings.TrimSpace(out), "\n") {
		var rec sampleJSON
		if err := json.Unmarshal([]byte(line), &rec); err != nil {
			t.Fatal(err)
		}
		if rec.Stop == "boundary" {
			boundaries++
			if last := rec.Tokens[len(rec.Tokens)-1]; last.ID != r.Vocab.Boundary() {
				t.Errorf("stop boundary but the last token is %d", last.ID)
			}
		}
		if strings.Contains(rec.Text, "\n") {
			t.Errorf("text %q runs past the line boundary", rec.Text)
		}
	}
	if boundaries == 0 {
		t.Errorf("none of 5 continuations of up to 400 tokens reached the line boundary")
	}
	// A stop string cuts the text before it, in the streamed output too.
	for _, stop := range []string{"a", "t "} {
		code, out, _ = runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the ", "--length", "400", "--seed", "4", "--stop", stop, "--json")
		var rec sampleJSON
		if code != exitOK || json.Unmarshal([]byte(out), &rec) != nil {
			t.Fatalf("exit %d output %q", code, out)
		}
		joined := ""
		for _, tk := range rec.Tokens {
			joined += tk.Text
		}
		if rec.Stop == "stop_string" {
			if strings.Contains(rec.Text, stop) || !strings.HasPrefix(joined, rec.Text+stop) {
				t.Errorf("stop %q: text %q, tokens spell %q", stop, rec.Text, joined)
			}
		}
		_, text, _ := runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the ", "--length", "400", "--seed", "4", "--stop", stop)
		if want := "the " + rec.Text + "\n"; text != want {
			t.Errorf("stop %q: streamed %q, want %q", stop, text, want)
		}
	}
}

// writeCounter records each Write, to check that text streams out token by
// token.
type writeCounter struct {
	bytes.Buffer
	writes int
}

func (w *writeCounter) Write(p []byte) (int, error) { w.writes++; return w.Buffer.Write(p) }

func TestSampleStreams(t *testing.T) {
	r := newDecodeRun(t, "")
	out := &writeCounter{}
	d := &deps{In: strings.NewReader(""), Out: out, Err: &bytes.Buffer{}, Now: time.Now}
	if code := run([]string{"sample", "--checkpoint", r.Ckpt, "--length", "30", "--seed", "1"}, d); code != exitOK {
		t.Fatalf("exit %d", code)
	}
	if out.writes < 30 {
		t.Errorf("30 tokens came out in %d writes, want one write per token", out.writes)
	}
}

func TestSampleUnknownPrompt(t *testing.T) {
	r := newDecodeRun(t, "line")
	code, _, stderr := runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the Zebra éats", "--length", "5", "--seed", "1")
	if code != exitFailure || strings.Count(stderr, "\n") != 1 ||
		!strings.Contains(stderr, `"Z"`) || !strings.Contains(stderr, `"b"`) || !strings.Contains(stderr, `"é"`) || !strings.Contains(stderr, "--map-unknown") {
		t.Errorf("got exit %d stderr %q, want 1 and one line listing \"Z\", \"b\", \"é\"", code, stderr)
	}
	code, out, stderr := runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the Zebra", "--length", "5", "--seed", "1", "--map-unknown")
	if code != exitOK || !strings.HasPrefix(out, "the Zebra") {
		t.Errorf("--map-unknown: got exit %d output %q stderr %q", code, out, stderr)
	}
	// A word model lists the words.
	w := newDecodeRunTokens(t, "word", "line")
	code, _, stderr = runCmd(t, "", "sample", "--run", w.Dir, "--prompt", "the zebra sat on a zebra rug", "--length", "5", "--seed", "1")
	if code != exitFailure || !strings.Contains(stderr, `2 words outside the model's vocabulary: "zebra", "rug"`) {
		t.Errorf("word model: got exit %d stderr %q", code, stderr)
	}
}

func TestSampleDamagedCheckpoint(t *testing.T) {
	r := newDecodeRun(t, "line")
	b, err := os.ReadFile(r.Ckpt)
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)-3] ^= 0x40
	if err := os.WriteFile(r.Ckpt, b, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, args := range [][]string{
		{"sample", "--run", r.Dir, "--length", "5"},
		{"sample", "--checkpoint", r.Ckpt, "--length", "5"},
		{"score", "--checkpoint", r.Ckpt, "-"},
	} {
		code, out, stderr := runCmd(t, "abc\n", args...)
		if code != exitFailure || out != "" || strings.Count(stderr, "\n") != 1 || !strings.HasPrefix(stderr, "weft: ") ||
			!strings.Contains(stderr, filepath.Base(r.Ckpt)) || strings.Contains(stderr, "goroutine") {
			t.Errorf("%v: got exit %d stdout %q stderr %q, want exit 1 and one line naming the file", args[:3], code, out, stderr)
		}
	}
	code, _, stderr := runCmd(t, "", "sample", "--checkpoint", filepath.Join(r.Dir, "missing.ckpt"))
	if code != exitFailure || strings.Count(stderr, "\n") != 1 {
		t.Errorf("missing checkpoint: got exit %d stderr %q", code, stderr)
	}
}

func TestSampleEmptyPromptFromStdin(t *testing.T) {
	r := newDecodeRun(t, "")
	// An empty prompt is the start of a document: the same as no prompt.
	_, a, _ := runCmd(t, "", "sample", "--checkpoint", r.Ckpt, "--prompt-file", "-", "--length", "20", "--seed", "6")
	_, b, _ := runCmd(t, "", "sample", "--checkpoint", r.Ckpt, "--length", "20", "--seed", "6")
	if a != b || len(a) == 0 {
		t.Errorf("empty stdin prompt gave %q, no prompt %q", a, b)
	}
	_, c, _ := runCmd(t, "the ", "sample", "--checkpoint", r.Ckpt, "--prompt-file", "-", "--length", "20", "--seed", "6")
	if !strings.HasPrefix(c, "the ") {
		t.Errorf("stdin prompt: got %q", c)
	}
}

func TestSampleLengthInCharacters(t *testing.T) {
	r := newDecodeRun(t, "")
	_, out, _ := runCmd(t, "", "sample", "--checkpoint", r.Ckpt, "--length", "17c", "--seed", "8", "--json")
	var rec sampleJSON
	if err := json.Unmarshal([]byte(out), &rec); err != nil {
		t.Fatal(err)
	}
	if rec.Characters != 17 {
		t.Errorf("--length 17c gave %d characters: %q", rec.Characters, rec.Text)
	}
}

func TestSameUpToRounding(t *testing.T) {
	for _, tc := range []struct {
		got, want string
		same      bool
	}{
		{`{"id":3,"bits":2.500497}`, `{"id":3,"bits":2.500498}`, true},
		{"a\t48.8146\t3", "a\t48.8147\t3", true},
		{`{"id":3,"bits":2.500497}`, `{"id":4,"bits":2.500497}`, false}, // integers exact
		{`{"id":3,"bits":2.5005}`, `{"id":3,"bits":2.5015}`, false},
		{"the cat 1.0", "the cot 1.0", false},
	} {
		if got := sameUpToRounding(tc.got, tc.want); got != tc.same {
			t.Errorf("%q vs %q: got %v, want %v", tc.got, tc.want, got, tc.same)
		}
	}
}

// TestSampleCheckpointChoice checks that --checkpoint picks the best copy,
// a step, the latest one or a file path, as the help says.
func TestSampleCheckpointChoice(t *testing.T) {
	r := newDecodeRun(t, "line")
	// A second model saved as step 5, different from the best one.
	cfg := r.Net.Config()
	other, err := rnn.NewModel[float32](cfg, r.Vocab.Len(), 99)
	if err != nil {
		t.Fatal(err)
	}
	f, err := checkpoint.NewModelFile(other, cfg, r.Vocab, nil)
	if err != nil {
		t.Fatal(err)
	}
	step := checkpoint.StepPath(filepath.Join(r.Dir, checkpointsDir), 5)
	if err := checkpoint.Save(step, f); err != nil {
		t.Fatal(err)
	}
	out := func(args ...string) string {
		t.Helper()
		code, o, stderr := runCmd(t, "", append([]string{"sample", "--length", "30", "--temperature", "0"}, args...)...)
		if code != exitOK {
			t.Fatalf("%v: exit %d %s", args, code, stderr)
		}
		return o
	}
	best, stepOut := out("--run", r.Dir), out("--checkpoint", step)
	if best == stepOut {
		t.Fatalf("the two models give the same greedy text %q; the test needs different ones", best)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--run", r.Dir, "--checkpoint", "best"}, best},
		{[]string{"--run", r.Dir, "--checkpoint", "5"}, stepOut},
		{[]string{"--run", r.Dir, "--checkpoint", "latest"}, stepOut},
		{[]string{"--run", r.Dir, "--checkpoint", filepath.Base(step)}, stepOut},
		{[]string{"--run", r.Dir, "--checkpoint", r.Ckpt}, best},
	} {
		if got := out(tc.args...); got != tc.want {
			t.Errorf("%v: got %q, want %q", tc.args[2:], got, tc.want)
		}
	}
}
