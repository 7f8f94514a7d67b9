package report

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"gonum.org/v1/plot/plotter"

	"weft/checkpoint/modeltest"
	"weft/checkpoint/runs"
	"weft/eval"
)

var update = flag.Bool("update", false, "rewrite the golden files and the screenshot")

// tol is the tolerance of the float comparisons (values computed by one
// formula in two orders).
const tol = 1e-9

func near(a, b float64) bool {
	return math.Abs(a-b) <= tol*max(1, math.Abs(a), math.Abs(b))
}

// fixture copies the fixed run of testdata/run into a temporary folder (the
// tests write its report folder) and returns its path.
func fixture(t testing.TB) string {
	t.Helper()
	dst := filepath.Join(t.TempDir(), "run")
	err := filepath.Walk(filepath.Join("testdata", "run"), func(p string, fi os.FileInfo, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(filepath.Join("testdata", "run"), p)
		if fi.IsDir() {
			return os.MkdirAll(filepath.Join(dst, rel), 0o755)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dst, rel), b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
	return dst
}

type goldenFigure struct {
	ID    string `json:"id"`
	Alt   string `json:"alt"`
	Table Table  `json:"table"`
}

// TestGolden compares the numbers behind every figure of the fixed run
// with testdata/golden.json (the figures' data, not their pixels).
func TestGolden(t *testing.T) {
	dir := fixture(t)
	d, err := Gather(dir)
	if err != nil {
		t.Fatal(err)
	}
	d.Run = "run"
	figs, err := Figures(d)
	if err != nil {
		t.Fatal(err)
	}
	var gf []goldenFigure
	for _, f := range figs {
		gf = append(gf, goldenFigure{f.ID, f.Alt, f.Table})
	}
	got, err := json.MarshalIndent(struct {
		Data    *Data          `json:"data"`
		Figures []goldenFigure `json:"figures"`
	}{d, gf}, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	golden := filepath.Join("testdata", "golden.json")
	if *update {
		if err := os.WriteFile(golden, append(got, '\n'), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(bytes.TrimSpace(got), bytes.TrimSpace(want)) {
		t.Errorf("figure data differ from %s (run with -update and review the diff):\n%s", golden, firstDiff(string(got), string(want)))
	}
	ids := map[string]bool{}
	for _, f := range figs {
		ids[f.ID] = true
		if len(f.Table.Rows) == 0 || f.Alt == "" {
			t.Errorf("figure %s: %d table rows, alt %q; want rows and a text alternative", f.ID, len(f.Table.Rows), f.Alt)
		}
	}
	for _, id := range []string{"curve-tokens", "curve-time", "learning-rate", "grad-norm", "comparison", "frequency-bands", "long-range"} {
		if !ids[id] {
			t.Errorf("the fixed run has no %s figure", id)
		}
	}
}

func firstDiff(a, b string) string {
	la, lb := strings.Split(a, "\n"), strings.Split(b, "\n")
	for i := 0; i < min(len(la), len(lb)); i++ {
		if la[i] != lb[i] {
			return "line " + itoa(i+1) + ":\n got  " + la[i] + "\n want " + lb[i]
		}
	}
	return "lengths differ: got " + itoa(len(la)) + " lines, want " + itoa(len(lb))
}

func itoa(n int) string { b, _ := json.Marshal(n); return string(b) }

// TestFixtureNumbers checks the golden numbers against the fixture's own
// files, computed here another way.
func TestFixtureNumbers(t *testing.T) {
	dir := fixture(t)
	d, err := Gather(dir)
	if err != nil {
		t.Fatal(err)
	}
	lines, err := runs.ReadMetrics(runs.Layout(dir).Metrics())
	if err != nil {
		t.Fatal(err)
	}
	if len(d.Curve) != len(lines) {
		t.Fatalf("got %d curve points, want one per metrics line (%d)", len(d.Curve), len(lines))
	}
	// The best checkpoint: the lowest val_bits_per_char of the log.
	best := math.Inf(1)
	for _, l := range lines {
		if l.ValBPC != nil && float64(*l.ValBPC) < best {
			best = float64(*l.ValBPC)
		}
	}
	if d.Best == nil || !near(float64(d.Best.ValBPC), best) {
		t.Errorf("best point %+v, want validation %v", d.Best, best)
	}
	// The first line's training loss, 3.8647421424083865 nats per token, of
	// a character model is 3.8647421424083865 / ln 2 = 5.575644323167167
	// bits per character (computed with Python's math.log).
	if got := float64(d.Curve[0].TrainBPC); !near(got, 5.575644323167167) {
		t.Errorf("first training point %v bits/char, want 5.575644323167167", got)
	}
	if d.Reference == nil || d.Reference.Model != "8-gram modified_kneser_ney" || !near(d.Reference.BitsPerChar, 1.1841543485819606) {
		t.Errorf("reference %+v, want 8-gram modified_kneser_ney at its test row's 1.1841543485819606", d.Reference)
	}
	if len(d.Recoveries) != 1 || d.Recoveries[0] != 120 {
		t.Errorf("recoveries %v, want [120] (status.json)", d.Recoveries)
	}
	if d.ClipNorm != 5 {
		t.Errorf("clip norm %v, want 5 (run.toml)", d.ClipNorm)
	}
	if d.State != StateEnded || !strings.Contains(d.Ended, "time budget") {
		t.Errorf("state %q, ended %q; want ended at the time budget", d.State, d.Ended)
	}
	var warned bool
	for _, w := range d.Facts.Warnings {
		warned = warned || strings.Contains(w, "fewer than 20 bootstrap blocks")
	}
	if !warned {
		t.Errorf("warnings %q lack the short test split (9,996 characters < eval.MinBootstrapBlocks (20) × 2,000)", d.Facts.Warnings)
	}
}

func TestCurveCharsPerToken(t *testing.T) {
	loss := runs.Number(2)
	c := curve([]runs.MetricsLine{{Step: 1, TrainLoss: &loss}}, 5)
	// 2 nats per token = 2 / ln 2 bits per token; five characters a token:
	// 2 / ln 2 / 5 = 0.5770780163555853 (Python's math.log).
	if got := float64(c[0].TrainBPC); !near(got, 0.5770780163555853) {
		t.Errorf("got %v bits/char, want 0.5770780163555853", got)
	}
	if !math.IsNaN(float64(c[0].ValBPC)) || !math.IsNaN(float64(c[0].GradNorm)) {
		t.Errorf("values not logged should be NaN, got %+v", c[0])
	}
}

func TestFamilyBars(t *testing.T) {
	// Best first, as a comparison's rows are; the families are the table's
	// (eval.Family): each smoother keeps its best order.
	rows := []eval.Result{
		{Model: "lstm", Kind: "rnn", BitsPerChar: 1.5, CILow: 1.4, CIHigh: 1.6},
		{Model: "5-gram kneser_ney", Kind: "ngram", BitsPerChar: 1.8},
		{Model: "3-gram kneser_ney", Kind: "ngram", BitsPerChar: 2.0},
		{Model: "5-gram witten_bell", Kind: "ngram", BitsPerChar: 2.1},
		{Model: "hmm-4", Kind: "hmm", BitsPerChar: 3},
		{Model: "2-gram add_k(1)", Kind: "ngram", BitsPerChar: math.Inf(1)},
	}
	got := familyBars(rows)
	want := []string{"lstm", "5-gram kneser_ney", "5-gram witten_bell", "hmm-4"}
	if len(got) != len(want) {
		t.Fatalf("got %d bars %+v, want %v", len(got), got, want)
	}
	for i, b := range got {
		if b.Model != want[i] {
			t.Errorf("bar %d: got %s, want %s", i, b.Model, want[i])
		}
	}
}

func TestBlocks(t *testing.T) {
	for _, c := range []struct {
		name  string
		n     int
		chars []int
		size  int
		want  []int
	}{
		// 10 one-character tokens in blocks of 4: 4, 4 and a remainder of
		// 2, which is not shorter than half a block and stays.
		{"remainder kept", 10, nil, 4, []int{0, 4, 8, 10}},
		// 9 tokens: a remainder of 1 joins the block before it.
		{"remainder joined", 9, nil, 4, []int{0, 4, 9}},
		{"one block", 3, nil, 4, []int{0, 3}},
		// Tokens of 3, 1, 2, 2, 5 characters in blocks of 4: 3+1, 2+2, 5.
		{"word tokens", 5, []int{3, 1, 2, 2, 5}, 4, []int{0, 2, 4, 5}},
	} {
		t.Run(c.name, func(t *testing.T) {
			got := Blocks(c.n, c.chars, c.size)
			if !equalInts(got, c.want) {
				t.Errorf("got %v, want %v", got, c.want)
			}
		})
	}
}

func TestMedianBlock(t *testing.T) {
	for _, c := range []struct {
		bpc  []float64
		want int
	}{
		{[]float64{3, 1, 2, 5}, 2}, // sorted 1, 2, 3, 5: position ⌊3/2⌋ = 1 holds 2, block 2
		{[]float64{2, 2, 1}, 0},    // sorted 1, 2, 2: position 1 holds the earlier 2
		{[]float64{7}, 0},
	} {
		if got := MedianBlock(c.bpc); got != c.want {
			t.Errorf("MedianBlock(%v) = %d, want %d", c.bpc, got, c.want)
		}
	}
}

func equalInts(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// uniform gives every token of a vocabulary of v the probability 1/v.
type uniform struct{ v int }

func (u uniform) Name() string   { return "uniform" }
func (u uniform) VocabSize() int { return u.v }
func (u uniform) LogProbs(_ context.Context, dst []float64, seq []int) error {
	for i := range seq {
		dst[i] = -math.Log(float64(u.v))
	}
	return nil
}

func TestSurprisal(t *testing.T) {
	m := modeltest.New(t, modeltest.Corpus, "char", "line")
	text := strings.Repeat(modeltest.Corpus, 70) // 4,830 characters: two blocks of 2,000 and a remainder joined
	toks := m.Vocab.Encode(nil, text)
	V := m.Vocab.Len()
	s, err := NewSurprisal(context.Background(), m, uniform{V}, "uniform", "test", toks, nil, 1)
	if err != nil {
		t.Fatal(err)
	}
	if s.Blocks != 2 || s.Block != 1 {
		t.Fatalf("block %d of %d, want 1 of 2", s.Block, s.Blocks)
	}
	// The first block starts at the split's start, so the stream behind the
	// top predictions has the whole history: its probability of each token
	// must be the bits LogProbs gave (two code paths of the model).
	st := m.Net.NewStream(1)
	dist := make([]float64, V)
	var bits float64
	for i, p := range s.Tokens {
		st.LogProbs(dist)
		if want := -dist[toks[i]] / math.Ln2; math.Abs(p.Bits-want) > 1e-4 {
			t.Fatalf("token %d: %v bits, the stream says %v", i, p.Bits, want)
		}
		// A uniform model over V symbols costs log2 V bits a token (common
		// practice: its perplexity is exactly V).
		if !near(float64(p.BaselineBits), math.Log2(float64(V))) {
			t.Fatalf("token %d: baseline %v bits, want log2 %d", i, p.BaselineBits, V)
		}
		if len(p.Top) != TopK || p.Top[0].Prob < p.Top[TopK-1].Prob {
			t.Fatalf("token %d: top predictions %+v, want %d, most probable first", i, p.Top, TopK)
		}
		if best := argmax(dist); math.Abs(p.Top[0].Prob-math.Exp(dist[best])) > 1e-12 {
			t.Fatalf("token %d: top guess %v, the stream's best %v", i, p.Top[0].Prob, math.Exp(dist[best]))
		}
		bits += p.Bits
		if err := st.Feed(toks[i : i+1]); err != nil {
			t.Fatal(err)
		}
	}
	if !near(s.BitsPerChar, bits/float64(len(s.Tokens))) {
		t.Errorf("block %v bits/char, its tokens average %v", s.BitsPerChar, bits/float64(len(s.Tokens)))
	}
	if _, err := NewSurprisal(context.Background(), m, nil, "", "test", toks, nil, 3); err == nil || !strings.Contains(err.Error(), "--stretch 3") {
		t.Errorf("stretch past the last block: got %v, want an error naming --stretch 3", err)
	}
	def, err := NewSurprisal(context.Background(), m, nil, "", "test", toks, nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	if def.Block != def.Median {
		t.Errorf("default block %d, want the median block %d", def.Block, def.Median)
	}
}

func argmax(x []float64) int {
	b := 0
	for i, v := range x {
		if v > x[b] {
			b = i
		}
	}
	return b
}

// external finds what would make a browser reach outside the page: a URL
// scheme, a protocol-relative address, an attribute that loads a
// resource, an import or a url() other than a fragment.
var external = regexp.MustCompile(`(?i)\b(https?|ftp|file|wss?|data):|=["']?//|\bsrc\s*=|\bhref\s*=\s*["']?[^"'#\s>]|<link\b|@import|url\(\s*[^#\s]`)

func TestPageSelfContained(t *testing.T) {
	dir := fixture(t)
	d, err := Gather(dir)
	if err != nil {
		t.Fatal(err)
	}
	if err := Write(dir, d); err != nil {
		t.Fatal(err)
	}
	page, err := os.ReadFile(PagePath(dir))
	if err != nil {
		t.Fatal(err)
	}
	if m := external.Find(page); m != nil {
		t.Errorf("the page refers to something outside it: %q", m)
	}
	// The check itself catches what it is for.
	for _, bad := range []string{`<img src="a.png">`, `<a href="http://x">`, `<svg xmlns="http://www.w3.org/2000/svg">`, `style="background:url(x.png)"`, `<link rel=stylesheet href=s.css>`} {
		if !external.MatchString(bad) {
			t.Errorf("the URL check misses %q", bad)
		}
	}
	for _, id := range []string{"curve-tokens", "curve-time", "learning-rate", "grad-norm", "comparison", "frequency-bands", "long-range"} {
		for _, ext := range []string{".svg", ".png"} {
			if fi, err := os.Stat(filepath.Join(runs.Layout(dir).Report(), id+ext)); err != nil || fi.Size() == 0 {
				t.Errorf("figure file %s%s: %v", id, ext, err)
			}
		}
		if !bytes.Contains(page, []byte(`id="fig-`+id+`"`)) {
			t.Errorf("the page lacks figure %s", id)
		}
	}
}

func TestReloadOnlyWhileLive(t *testing.T) {
	dir := fixture(t)
	d, err := Gather(dir)
	if err != nil {
		t.Fatal(err)
	}
	reload := []byte(`<meta http-equiv="refresh" content="60">`)
	for _, c := range []struct {
		state      string
		wantReload bool
		say        string
	}{
		{StateLive, true, "reloads itself every minute"},
		{StateEnded, false, "time budget reached at step 342. This page no longer reloads"},
	} {
		d.State = c.state
		page, err := Page(d, nil, nil)
		if err != nil {
			t.Fatal(err)
		}
		if got := bytes.Contains(page, reload); got != c.wantReload {
			t.Errorf("%s page: reload %v, want %v", c.state, got, c.wantReload)
		}
		if !bytes.Contains(page, []byte(c.say)) {
			t.Errorf("%s page does not say %q", c.state, c.say)
		}
	}
}

func TestStandings(t *testing.T) {
	mk := func(name string, test, val float64) *Data {
		d := &Data{Title: name}
		if !math.IsNaN(val) {
			d.Best = &CurvePoint{ValBPC: Number(val)}
		}
		if !math.IsNaN(test) {
			d.Comparison = &Comparison{Split: "test", Rows: []eval.Result{{Model: "lstm", Kind: "rnn", BitsPerChar: test}}}
		}
		return d
	}
	got := Standings([]*Data{mk("a", math.NaN(), 1.2), mk("b", 1.5, 1.4), mk("c", 1.3, 1.6), mk("d", math.NaN(), math.NaN())})
	want := []string{"c", "b", "a", "d"} // held-out score first, then validation, runs without either last
	for i, s := range got {
		if s.Run != want[i] {
			t.Errorf("place %d: got %s, want %s", i+1, s.Run, want[i])
		}
	}
}

func TestCurveTop(t *testing.T) {
	nan := Number(math.NaN())
	d := &Data{Curve: []CurvePoint{{ValBPC: nan}, {ValBPC: 2}, {ValBPC: 1.5}}}
	for _, c := range []struct {
		name  string
		ref   *Reference
		train plotter.XYs
		want  float64 // 0: no cap
	}{
		// The first validation is 2: the axis stops at 1.5 × 2 = 3 when a
		// training point lies above it.
		{"capped", nil, plotter.XYs{{Y: 5.5}, {Y: 2.1}}, 3},
		{"nothing above", nil, plotter.XYs{{Y: 2.9}}, 0},
		// A reference above the first validation raises the cap: 1.5 × 2.4.
		{"reference", &Reference{BitsPerChar: 2.4}, plotter.XYs{{Y: 5.5}}, 3.6},
	} {
		t.Run(c.name, func(t *testing.T) {
			d.Reference = c.ref
			got, ok := curveTop(d, c.train)
			if !ok {
				got = 0
			}
			if !near(got, c.want) {
				t.Errorf("got %v, want %v", got, c.want)
			}
		})
	}
}

// BenchmarkWrite is the cost of gathering the fixed run's files and
// writing its page and figures: live (what weft train pays at every
// validation, the PNG files left out) and ended.
func BenchmarkWrite(b *testing.B) {
	for _, pngs := range []bool{false, true} {
		b.Run(fmt.Sprintf("png=%v", pngs), func(b *testing.B) {
			dir := fixture(b)
			b.ReportAllocs()
			for b.Loop() {
				d, err := Gather(dir)
				if err != nil {
					b.Fatal(err)
				}
				if err := write(dir, d, pngs); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
