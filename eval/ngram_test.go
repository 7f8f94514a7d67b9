package eval

import (
	"context"
	_ "embed"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"strings"
	"testing"
)

// samCorpus is the three-sentence corpus of Jurafsky & Martin, Speech and
// Language Processing, 3rd ed. draft, ch. 3 (N-gram language models). The
// sentence end </s> is the boundary token; the start <s> is weft's
// start-of-document context.
func samCorpus(t *testing.T) (*words, []int) {
	t.Helper()
	w := newWords("</s>")
	var seq []int
	for _, s := range []string{"I am Sam", "Sam I am", "I do not like green eggs and ham"} {
		seq = append(seq, w.seq(strings.Fields(s)...)...)
		seq = append(seq, w.id("</s>"))
	}
	return w, seq
}

// prob returns P(word | history words) from a model's Distribution.
func probOf(t *testing.T, m interface {
	Distribution([]float64, []int) error
	VocabSize() int
}, w *words, word string, history ...string) float64 {
	t.Helper()
	dst := make([]float64, m.VocabSize())
	if err := m.Distribution(dst, w.seq(history...)); err != nil {
		t.Fatal(err)
	}
	return dst[w.id(word)]
}

func TestSamBigrams(t *testing.T) {
	w, seq := samCorpus(t)
	V := len(w.list) // 11: ten words and </s>
	c, err := CountNGrams(seq, V, 2, w.id("</s>"), nil)
	if err != nil {
		t.Fatal(err)
	}
	ml, err := NewNGram(c, 2, Smoothing{Method: MaxLikelihood})
	if err != nil {
		t.Fatal(err)
	}
	add1, err := NewNGram(c, 2, Smoothing{Method: AddK, K: 1})
	if err != nil {
		t.Fatal(err)
	}
	// C(v) below is the count of v as a context, c(v •); C(<s>) = 3.
	tests := []struct {
		word    string
		history []string // after <s>
		ml      float64  // J&M ch. 3 maximum-likelihood bigram values
		add1    float64  // (C(vw)+1)/(C(v)+V), J&M ch. 3 add-one, V = 11
	}{
		{"I", nil, 2.0 / 3, (2.0 + 1) / (3 + 11)},
		{"Sam", nil, 1.0 / 3, (1.0 + 1) / (3 + 11)},
		{"am", []string{"I"}, 2.0 / 3, (2.0 + 1) / (3 + 11)},
		{"</s>", []string{"Sam"}, 1.0 / 2, (1.0 + 1) / (2 + 11)},
		{"Sam", []string{"am"}, 1.0 / 2, (1.0 + 1) / (2 + 11)},
		{"do", []string{"I"}, 1.0 / 3, (1.0 + 1) / (3 + 11)},
		{"ham", []string{"I"}, 0, (0.0 + 1) / (3 + 11)},
	}
	for _, tt := range tests {
		name := fmt.Sprintf("P(%s|%s)", tt.word, strings.Join(append([]string{"<s>"}, tt.history...), " "))
		t.Run(name, func(t *testing.T) {
			checkClose(t, "maximum likelihood", probOf(t, ml, w, tt.word, tt.history...), tt.ml, tolExact)
			checkClose(t, "add-one", probOf(t, add1, w, tt.word, tt.history...), tt.add1, tolExact)
		})
	}
	// A zero maximum-likelihood probability is reported as -Inf, and the
	// row as infinite (never dropped): "I ham" was never seen.
	lp := make([]float64, 2)
	if err := ml.LogProbs(context.Background(), lp, w.seq("I", "ham")); err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(lp[1], -1) {
		t.Errorf("ln P_ML(ham|I): got %g, want -Inf", lp[1])
	}
	r := NewResult(ml.Name(), ml.Kind(), "test", lp, 6)
	if !math.IsInf(r.BitsPerChar, 1) || !math.IsInf(r.Perplexity, 1) || r.ZeroProbTokens != 1 {
		t.Errorf("result with a zero probability: got bpc %g, perplexity %g, %d zero tokens; want +Inf, +Inf, 1",
			r.BitsPerChar, r.Perplexity, r.ZeroProbTokens)
	}
}

func TestDiscountFormulas(t *testing.T) {
	// Expected values computed by hand from Chen & Goodman (1998), "An
	// empirical study of smoothing techniques for language modeling",
	// Harvard TR-10-98:
	// Y = n1/(n1+2 n2), D1 = 1-2Y n2/n1, D2 = 2-3Y n3/n2, D3+ = 3-4Y n4/n3.
	tests := []struct {
		n    [4]int
		want [3]float64
	}{
		// Y = 6/12 = 1/2; D1 = 1-3/6 = 0.5; D2 = 2-3/3 = 1; D3+ = 3-2/2 = 2.
		{[4]int{6, 3, 2, 1}, [3]float64{0.5, 1, 2}},
		// Y = 10/18 = 5/9; D1 = 1-2(5/9)(4/10) = 5/9; D2 = 2-3(5/9)(3/4) = 3/4;
		// D3+ = 3-4(5/9)(2/3) = 1.5185185...
		{[4]int{10, 4, 3, 2}, [3]float64{5.0 / 9, 0.75, 3 - 40.0/27}},
	}
	for _, tt := range tests {
		got := ModifiedDiscounts(tt.n)
		for k := range got {
			checkClose(t, fmt.Sprintf("n=%v D%d", tt.n, k+1), got[k], tt.want[k], tolExact)
		}
	}
	// Ney, Essen & Kneser (1994): D = n1/(n1+2 n2) = 6/12.
	checkClose(t, "absolute D", AbsoluteDiscount(6, 3), 0.5, tolExact)

	// The same count-of-counts built into a unigram corpus: six tokens
	// seen once, three twice, two three times, one four times; the model
	// must estimate the discounts above from its own counts.
	var seq []int
	id := 0
	for r, nr := range []int{6, 3, 2, 1} {
		for range nr {
			for range r + 1 {
				seq = append(seq, id)
			}
			id++
		}
	}
	V := id + 3 // three tokens never seen
	c, err := CountNGrams(seq, V, 1, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	if got := c.CountOfCounts(1, false); got != [4]int{6, 3, 2, 1} {
		t.Fatalf("count-of-counts: got %v, want [6 3 2 1]", got)
	}
	m, err := NewNGram(c, 1, Smoothing{Method: ModifiedKneserNey})
	if err != nil {
		t.Fatal(err)
	}
	if got := m.Discounts(1); got != [3]float64{0.5, 1, 2} {
		t.Errorf("estimated discounts: got %v, want [0.5 1 2]", got)
	}
	// Interpolated with the uniform base: P(w) = (c(w)-D(c))/N + γ/V with
	// γ = (D1 n1 + D2 n2 + D3+ n3+)/N (Chen & Goodman 1998).
	N := float64(len(seq)) // 6+6+6+4 = 22
	gamma := (0.5*6 + 1*3 + 2*3) / N
	dst := make([]float64, V)
	if err := m.Distribution(dst, nil); err != nil {
		t.Fatal(err)
	}
	checkClose(t, "P(seen once)", dst[0], (1-0.5)/N+gamma/float64(V), tolExact)
	checkClose(t, "P(seen four times)", dst[11], (4-2)/N+gamma/float64(V), tolExact)
	checkClose(t, "P(unseen)", dst[V-1], gamma/float64(V), tolExact)
}

var allSmoothings = []Smoothing{
	{Method: MaxLikelihood},
	{Method: AddK, K: 1},
	{Method: AddK, K: 0.01},
	{Method: WittenBell},
	{Method: Absolute},
	{Method: Absolute, Discount: 0.3},
	{Method: KneserNey},
	{Method: KneserNey, Discount: 0.9},
	{Method: ModifiedKneserNey},
	{Method: ModifiedKneserNey, Discounts: [3]float64{0.4, 1.1, 1.9}},
	{Method: WittenBell, NoFloor: true},
	{Method: KneserNey, NoFloor: true},
}

func TestNormalisation(t *testing.T) {
	// Common practice: every smoothed conditional distribution sums to 1
	// over the vocabulary, at seen, random and never-seen contexts.
	rng := rand.New(rand.NewPCG(7, 8))
	const V = 9
	train := make([]int, 3000)
	for i := range train {
		// A skewed, partly predictable source: 0 is the boundary, token 8
		// never occurs in training.
		if i > 0 && rng.IntN(3) == 0 {
			train[i] = (train[i-1] + 1) % 8
		} else {
			train[i] = min(7, int(rng.ExpFloat64()*2))
		}
	}
	c, err := CountNGrams(train, V, 6, 0, nil)
	if err != nil {
		t.Fatal(err)
	}
	histories := [][]int{nil, {8}, {8, 8, 8, 8, 8}, train[:10], {3, 0}, {0, 1, 2, 3, 4, 5, 6, 7}}
	for range 20 {
		h := make([]int, rng.IntN(8))
		for i := range h {
			h[i] = rng.IntN(V)
		}
		histories = append(histories, h)
	}
	dst := make([]float64, V)
	for _, s := range allSmoothings {
		for order := 1; order <= 6; order++ {
			m, err := NewNGram(c, order, s)
			if err != nil {
				t.Fatal(err)
			}
			name := fmt.Sprintf("%s/nofloor=%v", m.Name(), s.NoFloor)
			for _, h := range histories {
				if err := m.Distribution(dst, h); err != nil {
					t.Fatal(err)
				}
				total := 0.0
				for _, p := range dst {
					total += p
				}
				if math.Abs(total-1) > tolNorm {
					t.Errorf("%s: history %v: sum %.15g, want 1", name, h, total)
				}
				floored := s.Method != MaxLikelihood && !s.NoFloor
				if floored && dst[8] <= 0 {
					t.Errorf("%s: history %v: unseen token has probability %g, want > 0 (uniform base)", name, h, dst[8])
				}
			}
		}
	}
}

func TestLogProbsMatchDistribution(t *testing.T) {
	// LogProbs and Distribution must describe the same model: ln of
	// Distribution(seq[:i])[seq[i]] at every position, boundaries
	// included.
	rng := rand.New(rand.NewPCG(1, 2))
	const V = 6
	train := make([]int, 2000)
	for i := range train {
		train[i] = rng.IntN(V)
	}
	c, err := CountNGrams(train, V, 4, 5, nil)
	if err != nil {
		t.Fatal(err)
	}
	seq := make([]int, 200)
	for i := range seq {
		seq[i] = rng.IntN(V)
	}
	lp := make([]float64, len(seq))
	dst := make([]float64, V)
	for _, s := range allSmoothings {
		m, err := NewNGram(c, 4, s)
		if err != nil {
			t.Fatal(err)
		}
		if err := m.LogProbs(context.Background(), lp, seq); err != nil {
			t.Fatal(err)
		}
		for i := range seq {
			if err := m.Distribution(dst, seq[:i]); err != nil {
				t.Fatal(err)
			}
			if want := math.Log(dst[seq[i]]); !close(lp[i], want, tolExact) {
				t.Fatalf("%s: position %d: LogProbs %g, ln Distribution %g", m.Name(), i, lp[i], want)
			}
		}
	}
}

//go:embed testdata/nltk_reference.json
var nltkReferenceJSON []byte

type nltkReference struct {
	Version   string   `json:"nltk_version"`
	Order     int      `json:"order"`
	Sentences []string `json:"sentences"`
	Vocab     []string `json:"vocab"`
	Models    map[string][]struct {
		Context []string `json:"context"`
		Word    string   `json:"word"`
		P       float64  `json:"p"`
	} `json:"models"`
}

func TestAgainstNLTK(t *testing.T) {
	// Reference: Debian python3-nltk 3.8, nltk.lm, values written by
	// testdata/nltk_reference.py on its invented six-sentence corpus.
	// The test reproduces NLTK's configuration, which differs from weft's
	// defaults: sentences padded with order-1 "<s>" and "</s>", counts
	// taken from the everygrams of the padded sentences (padding counted),
	// one fixed discount for every order (0.1 for Kneser-Ney, 0.75 for
	// absolute discounting), the unigram level without the uniform floor
	// (NoFloor), and a vocabulary of the padding symbols, the words and
	// "<UNK>" (14).
	var ref nltkReference
	if err := json.Unmarshal(nltkReferenceJSON, &ref); err != nil {
		t.Fatal(err)
	}
	w := newWords(ref.Vocab...)
	n := ref.Order
	c := newCounts(len(w.list), n, NoBoundary, 100)
	for _, s := range ref.Sentences {
		var padded []string
		for range n - 1 {
			padded = append(padded, "<s>")
		}
		padded = append(padded, strings.Fields(s)...)
		for range n - 1 {
			padded = append(padded, "</s>")
		}
		ids := w.seq(padded...)
		for k := 1; k <= n; k++ { // nltk.util.everygrams
			for i := 0; i+k <= len(ids); i++ {
				c.addGram(ids[i : i+k])
			}
		}
	}
	c.finish()
	if len(w.list) != len(ref.Vocab) {
		t.Fatalf("corpus words outside the reference vocabulary: %v", w.list)
	}
	smoothings := map[string]Smoothing{
		"kneser_ney":  {Method: KneserNey, Discount: 0.1, NoFloor: true},
		"witten_bell": {Method: WittenBell, NoFloor: true},
		"absolute":    {Method: Absolute, Discount: 0.75, NoFloor: true},
		"lidstone":    {Method: AddK, K: 0.5},
	}
	for name, s := range smoothings {
		rows := ref.Models[name]
		if len(rows) < 100 {
			t.Fatalf("%s: only %d reference rows", name, len(rows))
		}
		m, err := NewNGram(c, n, s)
		if err != nil {
			t.Fatal(err)
		}
		t.Run(name, func(t *testing.T) {
			for _, r := range rows {
				ctx := w.seq(r.Context...)
				hist := make([]int, len(ctx)) // latest first
				for i, x := range ctx {
					hist[len(ctx)-1-i] = x
				}
				got := m.prob(m.walk(nil, hist), w.id(r.Word))
				checkClose(t, fmt.Sprintf("P(%s | %v)", r.Word, r.Context), got, r.P, tolRef)
			}
		})
	}
}

func TestLogProbsPiecesInvariant(t *testing.T) {
	// Scoring in parallel pieces must give exactly the single-pass values,
	// whatever falls on a cut (boundaries included), as the tabwriter
	// tests check chunking.
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(4))
	rng := rand.New(rand.NewPCG(4, 4))
	const V = 7
	seq := make([]int, 3*(1<<15)+123)
	for i := range seq {
		seq[i] = rng.IntN(V)
	}
	c, err := CountNGrams(seq[:20000], V, 5, 3, nil)
	if err != nil {
		t.Fatal(err)
	}
	m, err := NewNGram(c, 5, Smoothing{Method: ModifiedKneserNey})
	if err != nil {
		t.Fatal(err)
	}
	got := make([]float64, len(seq))
	want := make([]float64, len(seq))
	last, calls := 0, 0
	progress := func(stage string, done, total int) {
		calls++
		if stage != "score "+m.Name() || total != len(seq) || done <= last {
			t.Errorf("progress: got (%q, %d, %d) after %d", stage, done, total, last)
		}
		last = done
	}
	if err := LogProbsProgress(context.Background(), m, got, seq, progress); err != nil {
		t.Fatal(err)
	}
	if last != len(seq) || calls != 4 {
		t.Errorf("progress: %d calls ending at %d, want 4 ending at %d", calls, last, len(seq))
	}
	if err := m.logProbs(context.Background(), want, seq, 0, len(seq)); err != nil {
		t.Fatal(err)
	}
	for i := range got {
		if got[i] != want[i] {
			t.Fatalf("position %d: pieces %g, one pass %g", i, got[i], want[i])
		}
	}
}

func TestContinuationTypesEqualRawTypes(t *testing.T) {
	// With full start padding every event below the top order has a
	// longer event ending the same way, so the distinct tokens after a
	// context are the same under raw and continuation counts: the
	// Kneser-Ney weight D·N1+(h •)/Σ_w N1+(• h w) may read either (see
	// Counts, Padding). Checked on a corpus with boundaries.
	rng := rand.New(rand.NewPCG(6, 6))
	seq := make([]int, 5000)
	for i := range seq {
		seq[i] = rng.IntN(5)
	}
	c, err := CountNGrams(seq, 5, 4, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	for h := range c.Contexts() {
		if int(c.ctxDepth[h]) == c.Order()-1 {
			continue
		}
		if c.raw.distinct[h] != c.cont.distinct[h] {
			t.Fatalf("context %d (depth %d): %d raw types, %d continuation types", h, c.ctxDepth[h], c.raw.distinct[h], c.cont.distinct[h])
		}
	}
}
