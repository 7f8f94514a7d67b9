package onnx

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"weft/checkpoint/onnx/onnxtest"
)

// Tolerances of the runtime comparisons, in nats per log-probability.
//
// weftTol bounds |ONNX Runtime − weft| for one log-probability. Both
// compute in float32 (weft's final log-sum-exp is float64), but not with
// the same operations: ONNX Runtime has its own matrix kernels, summation
// orders and vectorised approximations of exp, tanh and the logistic
// function, each off by a few units in the last place of float32
// (2^-24 ≈ 6e-8 relative, common practice for such kernels). A
// log-probability is about ten such operations deep per layer and time
// step, and the recurrences carry the differences along a sequence
// without amplifying them much for these contractive random weights, so
// the expected difference is of order 1e-7 to 1e-6 nats for
// log-probabilities of magnitude up to about 10. The largest measured when
// written was 5.7e-7 (onnxruntime-node 1.30.0, amd64); weftTol leaves a
// margin of about 20. A wrong gate order or reset form changes
// log-probabilities by 2e-2 or more (seen by swapping them on purpose).
//
// stepTol bounds |one call − token-by-token calls| inside ONNX Runtime:
// the same operators on the same numbers, where only the kernels' blocking
// may differ with the sequence length (measured when written: 0, bit for
// bit).
const (
	weftTol = 1e-5
	stepTol = 1e-6
)

// runtimeOutput is what testdata/check.js prints.
type runtimeOutput struct {
	Inputs  []string           `json:"inputs"`
	Outputs []string           `json:"outputs"`
	Whole   map[string]ortData `json:"whole"`
	Steps   []map[string]ortData
}

type ortData struct {
	Dims []int     `json:"dims"`
	Data []float64 `json:"data"`
}

// TestRuntimeAgreesWithWeft exports a model of every kind, runs it in ONNX
// Runtime (the npm package onnxruntime-node, an implementation of the ONNX
// operators independent of weft) over held-out text, and checks every
// next-token distribution against weft's own: the log-probability of each
// actual token against rnn.Model.LogProbs (the code `weft score` and `weft
// eval` score with) and the whole distribution at each position against an
// rnn.Stream (the code `weft sample` draws from). It also checks that
// feeding the text one token at a time, with the state carried from call
// to call, gives what one call over the whole text gives.
func TestRuntimeAgreesWithWeft(t *testing.T) {
	rt := onnxtest.Find(t)
	script := onnxtest.Script(t, "check.js")
	v := demoVocab(t, 20000)
	V := v.Len()
	// Held out: demo text of another seed, which the vocabulary never saw
	// (its unknown characters, if any, are id 0 like any other).
	const rows, T = 2, 120
	held := v.Encode(nil, demoText(t, 7, 4000))
	if len(held) < rows*T {
		t.Fatalf("held-out text of %d tokens, want %d", len(held), rows*T)
	}
	seqs := [][]int{held[:T], held[len(held)-T:]}
	tokens := append(append([]int(nil), seqs[0]...), seqs[1]...)
	dir := t.TempDir()
	request := filepath.Join(dir, "request.json")
	writeJSON(t, request, map[string]any{"rows": rows, "tokens": tokens})

	worst := 0.0
	for i, c := range exportCases() {
		t.Run(c.name, func(t *testing.T) {
			net := randomModel(t, c.cfg, v, uint64(100+i))
			b, err := Encode(net, v, Options{ProducerVersion: "test"})
			if err != nil {
				t.Fatal(err)
			}
			path := filepath.Join(dir, c.name+".onnx")
			if err := os.WriteFile(path, b, 0o644); err != nil {
				t.Fatal(err)
			}
			var got runtimeOutput
			if err := json.Unmarshal(rt.Run(t, script, path, request), &got); err != nil {
				t.Fatal(err)
			}
			wantIn := []string{InputTokens, InputStateH}
			if c.cfg.Cell == "lstm" {
				wantIn = append(wantIn, InputStateC)
			}
			if strings.Join(got.Inputs, ",") != strings.Join(wantIn, ",") {
				t.Errorf("inputs %v, want %v", got.Inputs, wantIn)
			}
			whole := got.Whole
			lp, entry := whole[OutputLogProbs], whole[OutputEntryLogProbs]
			checkDims(t, OutputLogProbs, lp.Dims, rows, T, V)
			checkDims(t, OutputEntryLogProbs, entry.Dims, rows, V)
			checkDims(t, OutputStateH, whole[OutputStateH].Dims, c.cfg.Layers, rows, c.cfg.HiddenSize)

			// The actual tokens, against the scoring code.
			var d maxDiff
			for r, seq := range seqs {
				want := make([]float64, T)
				if err := net.LogProbs(context.Background(), want, seq); err != nil {
					t.Fatal(err)
				}
				d.add(fmt.Sprintf("row %d position 0 (entry)", r), entry.Data[r*V+seq[0]], want[0])
				for p := 1; p < T; p++ {
					d.add(fmt.Sprintf("row %d position %d", r, p), lp.Data[(r*T+p-1)*V+seq[p]], want[p])
				}
			}
			// Every distribution, against the sampling code.
			s := net.NewStream(rows)
			dist := make([]float64, rows*V)
			s.LogProbs(dist)
			for k, w := range dist {
				d.add(fmt.Sprintf("entry row %d id %d", k/V, k%V), entry.Data[k], w)
			}
			for p := 0; p < T; p++ {
				if err := s.Feed([]int{seqs[0][p], seqs[1][p]}); err != nil {
					t.Fatal(err)
				}
				s.LogProbs(dist)
				for k, w := range dist {
					r := k / V
					d.add(fmt.Sprintf("row %d after position %d id %d", r, p, k%V), lp.Data[(r*T+p)*V+k%V], w)
				}
			}
			t.Logf("ONNX Runtime vs weft: max |difference| %.3g nats over %d log-probabilities (at %s)", d.max, d.n, d.where)
			if d.max > weftTol {
				t.Errorf("ONNX Runtime vs weft at %s: got %.7g, want %.7g (|difference| %.3g > %g)", d.where, d.got, d.want, d.max, weftTol)
			}
			worst = math.Max(worst, d.max)

			// Token by token with the state carried, against one call.
			if len(got.Steps) != T {
				t.Fatalf("%d steps, want %d", len(got.Steps), T)
			}
			var st maxDiff
			for p, step := range got.Steps {
				checkDims(t, "step "+OutputLogProbs, step[OutputLogProbs].Dims, rows, 1, V)
				for r := 0; r < rows; r++ {
					for id := 0; id < V; id++ {
						st.add(fmt.Sprintf("step %d row %d id %d", p, r, id), step[OutputLogProbs].Data[r*V+id], lp.Data[(r*T+p)*V+id])
					}
				}
			}
			for k, w := range entry.Data {
				st.add("step 0 entry", got.Steps[0][OutputEntryLogProbs].Data[k], w)
			}
			last := got.Steps[T-1]
			for _, name := range []string{OutputStateH, OutputStateC} {
				for k, w := range whole[name].Data {
					st.add("final "+name, last[name].Data[k], w)
				}
			}
			if c.cfg.Cell == "lstm" && len(whole[OutputStateC].Data) != c.cfg.Layers*rows*c.cfg.HiddenSize {
				t.Errorf("%s has %d values, want %d", OutputStateC, len(whole[OutputStateC].Data), c.cfg.Layers*rows*c.cfg.HiddenSize)
			}
			t.Logf("token by token vs one call: max |difference| %.3g over %d values", st.max, st.n)
			if st.max > stepTol {
				t.Errorf("token by token vs one call at %s: got %.7g, want %.7g (|difference| %.3g > %g)", st.where, st.got, st.want, st.max, stepTol)
			}
		})
	}
	t.Logf("largest ONNX Runtime vs weft difference over all models: %.3g nats", worst)
}

// maxDiff tracks the largest |got − want| of a comparison.
type maxDiff struct {
	max, got, want float64
	where          string
	n              int
}

func (d *maxDiff) add(where string, got, want float64) {
	d.n++
	diff := math.Abs(got - want)
	if math.IsNaN(diff) {
		diff = math.Inf(1)
	}
	if diff > d.max || d.where == "" {
		d.max, d.got, d.want, d.where = diff, got, want, where
	}
}

func checkDims(t *testing.T, name string, got []int, want ...int) {
	t.Helper()
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("%s has dims %v, want %v", name, got, want)
	}
}

func writeJSON(t *testing.T, path string, v any) {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestReadmeExample runs the README's example, testdata/score_line.js, on
// held-out lines and checks its surprise in bits against weft's for the
// same line and its line end from the start of a document (rnn.Model's
// LogProbs, which `weft score --unit line` reports; cmd/weft's export test
// compares with the command itself).
func TestReadmeExample(t *testing.T) {
	rt := onnxtest.Find(t)
	script := onnxtest.Script(t, "score_line.js")
	v := demoVocab(t, 20000)
	c := exportCases()[1] // two LSTM layers and a projection
	net := randomModel(t, c.cfg, v, 9)
	b, err := Encode(net, v, Options{})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "model.onnx")
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(demoText(t, 11, 600), "\n")[:3]
	lines = append(lines, "Ünknown ¶ characters") // ids 0 (unknown) in the middle
	for _, line := range lines {
		ids := v.Encode(nil, line+"\n")
		lp := make([]float64, len(ids))
		if err := net.LogProbs(context.Background(), lp, ids); err != nil {
			t.Fatal(err)
		}
		want := 0.0
		for _, x := range lp {
			want -= x / math.Ln2
		}
		out := strings.TrimSpace(string(rt.Run(t, script, path, line)))
		got, err := strconv.ParseFloat(out, 64)
		if err != nil {
			t.Fatalf("score_line.js printed %q", out)
		}
		// weftTol per token, in bits, plus the 6 decimals printed.
		if tol := float64(len(ids))*weftTol/math.Ln2 + 5e-7; math.Abs(got-want) > tol {
			t.Errorf("line %q: score_line.js gives %.6f bits, weft %.6f (tolerance %.2g)", line, got, want, tol)
		}
	}
}

// TestReadmeShowsTheExample checks that the README's "Deploying a model"
// section shows testdata/score_line.js as it is, so that the example there
// is the script TestReadmeExample and cmd/weft's TestExport run.
func TestReadmeShowsTheExample(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	script, err := os.ReadFile(filepath.Join("testdata", "score_line.js"))
	if err != nil {
		t.Fatal(err)
	}
	_, section, ok := strings.Cut(string(readme), "\n## Deploying a model\n")
	if !ok {
		t.Fatal(`README.md has no "## Deploying a model" section`)
	}
	section, _, _ = strings.Cut(section, "\n## ")
	_, block, ok := strings.Cut(section, "\n```js\n")
	if ok {
		block, _, ok = strings.Cut(block, "```\n")
	}
	if !ok || block != string(script) {
		t.Errorf("the js block of the README's Deploying a model section is not testdata/score_line.js as it is (copy the file into it)")
	}
}
