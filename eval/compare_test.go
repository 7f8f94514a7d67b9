package eval

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// fixedModel gives every token the same probability whatever its history:
// p[w] for token w. With such models every figure of a comparison can be
// computed by hand from the token counts of a split.
type fixedModel struct {
	name, kind string
	p          []float64
}

func (m fixedModel) Name() string   { return m.name }
func (m fixedModel) Kind() string   { return m.kind }
func (m fixedModel) VocabSize() int { return len(m.p) }
func (m fixedModel) LogProbs(_ context.Context, dst []float64, seq []int) error {
	for i, w := range seq {
		dst[i] = math.Log(m.p[w])
	}
	return nil
}

// repeatTokens returns n tokens cycling through pattern.
func repeatTokens(pattern []int, n int) []int {
	out := make([]int, n)
	for i := range out {
		out[i] = pattern[i%len(pattern)]
	}
	return out
}

// bitsOf is the total of -log2 p[w] over seq, computed here from the
// token counts rather than by summing the models' log-probabilities.
func bitsOf(p []float64, seq []int) float64 {
	counts := make([]int, len(p))
	for _, w := range seq {
		counts[w]++
	}
	var bits float64
	for w, c := range counts {
		if c > 0 {
			bits -= float64(c) * math.Log2(p[w])
		}
	}
	return bits
}

// mixBits is the total bits of the mixture λ·pa + (1-λ)·pb over seq.
func mixBits(lambda float64, pa, pb []float64, seq []int) float64 {
	mix := make([]float64, len(pa))
	for w := range mix {
		mix[w] = lambda*pa[w] + (1-lambda)*pb[w]
	}
	return bitsOf(mix, seq)
}

// bestLambdaGrid returns the λ on a grid of step 1e-4 that gives seq the
// fewest bits under the mixture: an independent check of TuneMixture.
func bestLambdaGrid(pa, pb []float64, seq []int) float64 {
	best, bestBits := 0.0, math.Inf(1)
	for k := 0; k <= 10000; k++ {
		l := float64(k) / 10000
		if b := mixBits(l, pa, pb, seq); b < bestBits {
			best, bestBits = l, b
		}
	}
	return best
}

func rowByModel(t *testing.T, rows []Result, model string) Result {
	t.Helper()
	for _, r := range rows {
		if r.Model == model {
			return r
		}
	}
	t.Fatalf("no row %q", model)
	return Result{}
}

// TestCompareChoosesOnValidation builds a case where every choice the
// comparison makes on the validation split differs from the one the test
// split would give: baseline A is best on validation, B on test, and the
// interpolation weight that suits validation is far from the one that
// suits test. The comparison must report A as the best baseline, take the
// differences from A, and use the validation weight (issue 11).
func TestCompareChoosesOnValidation(t *testing.T) {
	// Four tokens. Validation is mostly token 0, test mostly token 1.
	val := repeatTokens([]int{0, 0, 0, 1, 2, 3}, 2400)
	test := repeatTokens([]int{1, 1, 1, 0, 2, 3}, 2400)
	pa := []float64{0.7, 0.1, 0.1, 0.1} // good on validation
	pb := []float64{0.1, 0.7, 0.1, 0.1} // good on test
	pr := []float64{0.4, 0.4, 0.1, 0.1} // the "recurrent" model
	ngA := fixedModel{"A", "ngram", pa}
	ngB := fixedModel{"B", "ngram", pb}
	rnn := fixedModel{"R", "rnn", pr}

	// Independent expectations from the token counts.
	valBitsA, valBitsB := bitsOf(pa, val), bitsOf(pb, val)
	testBitsA, testBitsB := bitsOf(pa, test), bitsOf(pb, test)
	if !(valBitsA < valBitsB && testBitsB < testBitsA) {
		t.Fatalf("the case does not separate the splits: validation %g %g, test %g %g", valBitsA, valBitsB, testBitsA, testBitsB)
	}
	lamVal := bestLambdaGrid(pr, pa, val)
	lamTest := bestLambdaGrid(pr, pa, test)
	if math.Abs(lamVal-lamTest) < 0.2 {
		t.Fatalf("the case does not separate the weights: %g and %g", lamVal, lamTest)
	}

	cfg := DefaultConfig()
	cfg.BootstrapSamples = 200
	cfg.BootstrapBlockChars = 100
	cmp, err := Compare(context.Background(), cfg, CompareInput{
		Split:      "test",
		Validation: HeldOut{Tokens: val},
		Reported:   HeldOut{Tokens: test},
		Models:     []Entrant{{Model: rnn}, {Model: ngB}, {Model: ngA}},
		Unknown:    -1,
	})
	if err != nil {
		t.Fatal(err)
	}
	if cmp.ConfidenceLevel != cfg.ConfidenceLevel {
		t.Errorf("confidence level: got %g, want the config's %g", cmp.ConfidenceLevel, cfg.ConfidenceLevel)
	}
	if cmp.BestBaseline != "A" {
		t.Errorf("best baseline: got %q, want A (best on validation; B is best on test)", cmp.BestBaseline)
	}
	checkClose(t, "best baseline's validation bits/char", cmp.BestBaselineValBPC, valBitsA/float64(len(val)), tolExact*100)
	// TuneMixture's EM stops when λ moves by less than 1e-7; the grid has
	// step 1e-4, so the two agree within half a step.
	if math.Abs(cmp.Lambda-lamVal) > 0.6e-4 {
		t.Errorf("λ: got %g, want the validation optimum %g (the test optimum is %g)", cmp.Lambda, lamVal, lamTest)
	}
	rowA, rowB := rowByModel(t, cmp.Rows, "A"), rowByModel(t, cmp.Rows, "B")
	checkClose(t, "A test bits/char", rowA.BitsPerChar, testBitsA/float64(len(test)), 1e-12)
	checkClose(t, "B test bits/char", rowB.BitsPerChar, testBitsB/float64(len(test)), 1e-12)
	if rowB.Reference != "A" {
		t.Errorf("B's reference: got %q, want A", rowB.Reference)
	}
	checkClose(t, "B minus A", rowB.DiffBitsPerChar, (testBitsB-testBitsA)/float64(len(test)), 1e-12)
	var mix Result
	for _, r := range cmp.Rows {
		if r.Kind == "interpolated" {
			mix = r
		}
	}
	if mix.Kind == "" {
		t.Fatal("no interpolated row")
	}
	checkClose(t, "interpolated test bits/char", mix.BitsPerChar, mixBits(cmp.Lambda, pr, pa, test)/float64(len(test)), 1e-12)
	// Rows best first.
	for i := 1; i < len(cmp.Rows); i++ {
		if cmp.Rows[i].BitsPerChar < cmp.Rows[i-1].BitsPerChar {
			t.Errorf("row %d (%g) better than row %d (%g)", i, cmp.Rows[i].BitsPerChar, i-1, cmp.Rows[i-1].BitsPerChar)
		}
	}
}

// TestCompareInterpolatesWithBestNgram: the interpolated row mixes the
// recurrent model with the best n-gram on validation, as the config and
// the README promise, even when a Markov chain or an HMM is the best
// baseline (issue 11, defect 8: the partner was the best baseline of any
// kind).
func TestCompareInterpolatesWithBestNgram(t *testing.T) {
	val := repeatTokens([]int{0, 0, 0, 1, 2, 3}, 1200)
	test := repeatTokens([]int{0, 0, 1, 1, 2, 3}, 1200)
	markov := fixedModel{"M", "markov", []float64{0.6, 0.2, 0.1, 0.1}}
	hmm := fixedModel{"H", "hmm", []float64{0.7, 0.1, 0.1, 0.1}}
	ngram := fixedModel{"N", "ngram", []float64{0.5, 0.3, 0.1, 0.1}}
	worse := fixedModel{"W", "ngram", []float64{0.25, 0.25, 0.25, 0.25}}
	rnn := fixedModel{"R", "rnn", []float64{0.3, 0.5, 0.1, 0.1}}
	cfg := DefaultConfig()
	cfg.BootstrapSamples = 0
	cmp, err := Compare(context.Background(), cfg, CompareInput{
		Split: "test", Validation: HeldOut{Tokens: val}, Reported: HeldOut{Tokens: test},
		Models: []Entrant{{Model: rnn}, {Model: worse}, {Model: hmm}, {Model: markov}, {Model: ngram}}, Unknown: -1,
	})
	if err != nil {
		t.Fatal(err)
	}
	if cmp.BestBaseline != "M" {
		t.Errorf("best baseline: got %q, want the Markov chain M (best on validation)", cmp.BestBaseline)
	}
	if cmp.InterpolationPartner != "N" {
		t.Errorf("interpolation partner: got %q, want N, the best n-gram on validation", cmp.InterpolationPartner)
	}
	if math.Abs(cmp.Lambda-bestLambdaGrid(rnn.p, ngram.p, val)) > 0.6e-4 {
		t.Errorf("λ %g is not the validation optimum of R with N", cmp.Lambda)
	}
	for _, r := range cmp.Rows {
		if r.Kind == "interpolated" && !strings.Contains(r.Model, "R + N") {
			t.Errorf("interpolated row %q does not mix R with N", r.Model)
		}
	}
}

// TestCompareShortSplitIntervals: a held-out text shorter than
// MinBootstrapBlocks blocks gets shrunk blocks and a note, never an
// interval of zero width read as certainty; one shorter than
// MinBootstrapBlocks characters gets no interval and a note (issue 11,
// defect 5).
func TestCompareShortSplitIntervals(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	seq := func(n int) []int {
		s := make([]int, n)
		for i := range s {
			s[i] = rng.IntN(4)
		}
		return s
	}
	m := fixedModel{"A", "ngram", []float64{0.4, 0.3, 0.2, 0.1}}
	cfg := DefaultConfig() // blocks of 2000 characters
	cfg.BootstrapSamples = 300
	for _, tc := range []struct {
		n         int
		wantBlock int
		wantNote  string
		wantWidth bool
	}{{600, 30, "shrunk", true}, {12, 0, "no intervals", false}} {
		cmp, err := Compare(context.Background(), cfg, CompareInput{
			Split: "test", Validation: HeldOut{Tokens: seq(tc.n)}, Reported: HeldOut{Tokens: seq(tc.n)},
			Models: []Entrant{{Model: m}}, Unknown: -1,
		})
		if err != nil {
			t.Fatal(err)
		}
		r := cmp.Rows[0]
		if cmp.BlockChars != tc.wantBlock || !strings.Contains(cmp.IntervalNote, tc.wantNote) {
			t.Errorf("%d characters: blocks %d, note %q; want %d and %q", tc.n, cmp.BlockChars, cmp.IntervalNote, tc.wantBlock, tc.wantNote)
		}
		if tc.wantWidth && !(r.CIHigh-r.CILow > 0) {
			t.Errorf("%d characters: interval [%g, %g] has no width", tc.n, r.CILow, r.CIHigh)
		}
		if !tc.wantWidth && !(math.IsNaN(r.CILow) && math.IsNaN(r.CIHigh)) {
			t.Errorf("%d characters: got interval [%g, %g], want none", tc.n, r.CILow, r.CIHigh)
		}
	}
}

// TestFamilyBest keeps the best row of each family (each smoother its best
// order) in order, and a row asked for by name.
func TestFamilyBest(t *testing.T) {
	rows := []Result{
		{Model: "lstm 1x16 (step 5) + 5-gram kneser_ney (λ=0.80)", Kind: "interpolated"},
		{Model: "5-gram kneser_ney", Kind: "ngram"},
		{Model: "lstm 1x16 (step 5)", Kind: "rnn"},
		{Model: "3-gram kneser_ney", Kind: "ngram"},
		{Model: "5-gram witten_bell", Kind: "ngram"},
		{Model: "markov-2(add 1)", Kind: "markov"},
		{Model: "3-gram witten_bell", Kind: "ngram"},
		{Model: "markov-1(add 1)", Kind: "markov"},
		{Model: "hmm-32", Kind: "hmm"},
	}
	var got []string
	for _, r := range FamilyBest(rows, "3-gram witten_bell") {
		got = append(got, r.Model)
	}
	want := []string{"lstm 1x16 (step 5) + 5-gram kneser_ney (λ=0.80)", "5-gram kneser_ney", "lstm 1x16 (step 5)", "5-gram witten_bell", "markov-2(add 1)", "3-gram witten_bell", "hmm-32"}
	if !slices.Equal(got, want) {
		t.Errorf("got %q\nwant %q", got, want)
	}
}
