package rnn

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"

	"weft/rnn/linalg"
)

// decodeTol bounds the difference between a log-probability computed by a
// Stream one step at a time and by LogProbs in chunks (float64 models).
const decodeTol = 1e-9

// chi2Critical001 are upper critical values of the chi-square distribution
// at significance 0.001, by degrees of freedom, from
// testdata/chi2_critical.py (torch.special.gammainc and bisection; they
// agree with the printed tables, e.g. NIST/SEMATECH e-Handbook §1.3.6.7.4:
// df 7 → 24.322).
var chi2Critical001 = map[int]float64{3: 16.266236, 7: 24.321886}

func decodeModel(t testing.TB, cell string, vocab int, seed uint64) *Model[float64] {
	t.Helper()
	c := DefaultConfig()
	c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize = cell, 1, 10, 4
	c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.8, "uniform"
	m, err := NewModel[float64](c, vocab, seed)
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.outB { // a clearly non-uniform start
		m.outB[i] = 0.3 * float64(i%5)
	}
	return m
}

// nextDist is the model's distribution after seq, computed through
// LogProbs (the scoring path, independent of Stream): ln P(j | seq) is the
// last value of LogProbs(seq + [j]).
func nextDist(t *testing.T, m *Model[float64], seq []int) []float64 {
	t.Helper()
	V := m.VocabSize()
	out := make([]float64, V)
	s := append(slices.Clone(seq), 0)
	lp := make([]float64, len(s))
	for j := 0; j < V; j++ {
		s[len(s)-1] = j
		if err := m.LogProbs(context.Background(), lp, s); err != nil {
			t.Fatal(err)
		}
		out[j] = lp[len(lp)-1]
	}
	return out
}

func generateTokens[T Float](t testing.TB, m *Model[T], prompt []int, cfg Sampling, seed uint64, n int) []Token {
	t.Helper()
	var rng *rand.Rand
	if seed != 0 {
		rng = rand.New(rand.NewPCG(seed, 1))
	}
	sp, err := NewSampler(cfg, rng)
	if err != nil {
		t.Fatal(err)
	}
	s := m.NewStream(1)
	if err := Prime(context.Background(), s, prompt); err != nil {
		t.Fatal(err)
	}
	var out []Token
	if _, err := Generate(context.Background(), s, sp, n, func(tk Token) (bool, error) {
		out = append(out, tk)
		return false, nil
	}); err != nil {
		t.Fatal(err)
	}
	return out
}

func TestGreedyIsArgmaxPath(t *testing.T) {
	prompt := []int{2, 5, 1}
	const n = 12
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		t.Run(cell, func(t *testing.T) {
			m := decodeModel(t, cell, 7, 11)
			greedy := generateTokens(t, m, prompt, Sampling{Temperature: 0}, 0, n)
			// The argmax path, derived from the distributions alone.
			seq := slices.Clone(prompt)
			for i := 0; i < n; i++ {
				d := nextDist(t, m, seq)
				want := 0
				for j := range d {
					if d[j] > d[want] {
						want = j
					}
				}
				if greedy[i].ID != want || !closeTo(greedy[i].LogProb, d[want], decodeTol) {
					t.Fatalf("step %d: greedy gave %d (%v), argmax is %d (%v)", i, greedy[i].ID, greedy[i].LogProb, want, d[want])
				}
				seq = append(seq, want)
			}
			// top-k = 1 at any temperature is greedy.
			topk := generateTokens(t, m, prompt, Sampling{Temperature: 1.5, TopK: 1}, 99, n)
			if !slices.Equal(topk, greedy) {
				t.Errorf("top-k 1: got %v, want greedy %v", topk, greedy)
			}
			// A beam of width 1 is greedy.
			hyps, err := BeamSearch(context.Background(), m, prompt, BeamConfig{Width: 1, MaxTokens: n, End: -1})
			if err != nil {
				t.Fatal(err)
			}
			if len(hyps) != 1 || !slices.Equal(hyps[0].Tokens, greedy) {
				t.Errorf("beam 1: got %v, want greedy %v", hyps, greedy)
			}
		})
	}
}

// enumerate lists every continuation of at most n tokens of prompt that
// ends at the first end token or after n tokens, with its log-probability
// computed by LogProbs on the whole sequence.
func enumerate(t *testing.T, m *Model[float64], prompt []int, n, end int) []Hypothesis {
	t.Helper()
	V := m.VocabSize()
	var out []Hypothesis
	var walk func(cont []int)
	walk = func(cont []int) {
		ended := len(cont) > 0 && cont[len(cont)-1] == end
		if ended || len(cont) == n {
			seq := append(slices.Clone(prompt), cont...)
			lp := make([]float64, len(seq))
			if err := m.LogProbs(context.Background(), lp, seq); err != nil {
				t.Fatal(err)
			}
			h := Hypothesis{Ended: ended}
			for i, tok := range cont {
				l := lp[len(prompt)+i]
				h.Tokens = append(h.Tokens, Token{tok, l})
				h.LogProb += l
			}
			out = append(out, h)
			return
		}
		for j := 0; j < V; j++ {
			walk(append(slices.Clone(cont), j))
		}
	}
	walk(nil)
	sort.SliceStable(out, func(i, j int) bool { return out[i].LogProb > out[j].LogProb })
	return out
}

func ids(ts []Token) []int {
	out := make([]int, len(ts))
	for i, t := range ts {
		out[i] = t.ID
	}
	return out
}

func TestBeamExhaustive(t *testing.T) {
	const V, n = 3, 4
	prompt := []int{2, 0}
	for _, tc := range []struct {
		name string
		end  int
		seqs int // number of possible continuations
	}{
		{"no-end", -1, 81},           // 3^4
		{"end=1", 1, 1 + 2 + 4 + 24}, // end after 1, 2, 3 tokens, or any 4 tokens with no earlier end
	} {
		t.Run(tc.name, func(t *testing.T) {
			m := decodeModel(t, "lstm", V, 5)
			all := enumerate(t, m, prompt, n, tc.end)
			if len(all) != tc.seqs {
				t.Fatalf("enumerated %d continuations, want %d", len(all), tc.seqs)
			}
			hyps, err := BeamSearch(context.Background(), m, prompt, BeamConfig{Width: tc.seqs, MaxTokens: n, End: tc.end})
			if err != nil {
				t.Fatal(err)
			}
			if len(hyps) != len(all) {
				t.Fatalf("beam of width %d returned %d continuations, want all %d", tc.seqs, len(hyps), len(all))
			}
			if !slices.Equal(ids(hyps[0].Tokens), ids(all[0].Tokens)) || !closeTo(hyps[0].LogProb, all[0].LogProb, decodeTol) {
				t.Fatalf("best: got %v (%v), want %v (%v)", ids(hyps[0].Tokens), hyps[0].LogProb, ids(all[0].Tokens), all[0].LogProb)
			}
			// The whole final beam is the enumeration in order.
			for k := range all {
				if !closeTo(hyps[k].LogProb, all[k].LogProb, decodeTol) || hyps[k].Ended != all[k].Ended {
					t.Errorf("rank %d: got %v %v ended=%v, want %v %v ended=%v", k, ids(hyps[k].Tokens), hyps[k].LogProb, hyps[k].Ended,
						ids(all[k].Tokens), all[k].LogProb, all[k].Ended)
				}
			}
		})
	}
}

func TestBeamEndsAtChars(t *testing.T) {
	m := decodeModel(t, "gru", 5, 2)
	chars := func(id int) int { return id % 3 } // tokens of 0, 1 or 2 characters
	hyps, err := BeamSearch(context.Background(), m, nil, BeamConfig{Width: 4, MaxTokens: 50, End: -1, Chars: chars, MaxChars: 6})
	if err != nil {
		t.Fatal(err)
	}
	for _, h := range hyps {
		c := 0
		for i, tk := range h.Tokens {
			if c >= 6 {
				t.Fatalf("%v: token %d generated after reaching 6 characters", ids(h.Tokens), i)
			}
			c += chars(tk.ID)
		}
		if !h.Ended || c < 6 {
			t.Errorf("%v: %d characters, ended=%v; want at least 6 and ended", ids(h.Tokens), c, h.Ended)
		}
	}
}

func softmaxTempered(logp []float64, temp float64) []float64 {
	p := make([]float64, len(logp))
	var z float64
	for j, l := range logp {
		p[j] = math.Exp(l / temp)
		z += p[j]
	}
	for j := range p {
		p[j] /= z
	}
	return p
}

// TestDrawFrequencies checks, by Pearson's chi-square goodness-of-fit test
// at significance 0.001, that seeded draws from a fixed state follow the
// distribution each setting promises. The seeds are fixed, so the test
// gives the same statistic on every run.
func TestDrawFrequencies(t *testing.T) {
	const V, draws = 8, 40000
	m := decodeModel(t, "lstm", V, 9)
	s := m.NewStream(1)
	if err := Prime(context.Background(), s, []int{3, 1, 4, 1, 5}); err != nil {
		t.Fatal(err)
	}
	logp := make([]float64, V)
	s.LogProbs(logp)
	for _, tc := range []struct {
		name string
		cfg  Sampling
		want func() []float64
	}{
		// The model's own softmax.
		{"temperature=1", Sampling{Temperature: 1}, func() []float64 { return softmaxTempered(logp, 1) }},
		// softmax(ln P / τ).
		{"temperature=0.6", Sampling{Temperature: 0.6}, func() []float64 { return softmaxTempered(logp, 0.6) }},
		// P renormalized over the 4 most probable tokens.
		{"top-k=4", Sampling{Temperature: 1, TopK: 4}, func() []float64 {
			p := softmaxTempered(logp, 1)
			order := make([]int, V)
			for j := range order {
				order[j] = j
			}
			sort.Slice(order, func(a, b int) bool { return p[order[a]] > p[order[b]] })
			q := make([]float64, V)
			var z float64
			for _, j := range order[:4] {
				q[j] = p[j]
				z += p[j]
			}
			for j := range q {
				q[j] /= z
			}
			return q
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			sp, err := NewSampler(tc.cfg, rand.New(rand.NewPCG(2026, 12)))
			if err != nil {
				t.Fatal(err)
			}
			count := make([]int, V)
			for i := 0; i < draws; i++ {
				count[sp.Draw(logp)]++
			}
			want := tc.want()
			var chi2 float64
			df := -1
			for j := range want {
				if want[j] == 0 {
					if count[j] != 0 {
						t.Fatalf("token %d has probability 0 and was drawn %d times", j, count[j])
					}
					continue
				}
				e := want[j] * draws
				if e < 5 {
					t.Fatalf("token %d: expected count %.1f is too small for the chi-square test", j, e)
				}
				chi2 += (float64(count[j]) - e) * (float64(count[j]) - e) / e
				df++
			}
			crit, ok := chi2Critical001[df]
			if !ok {
				t.Fatalf("no critical value for %d degrees of freedom", df)
			}
			if chi2 > crit {
				t.Errorf("chi-square %.3f with %d degrees of freedom, above the 0.001 critical value %.3f (counts %v, probabilities %.4f)", chi2, df, crit, count, want)
			}
		})
	}
}

// TestNucleusStaysInside checks that nucleus sampling draws only from the
// smallest set of most probable tokens whose probability reaches p
// (Holtzman et al. 2020, eq. 2), computed here from the softmax directly.
func TestNucleusStaysInside(t *testing.T) {
	const V = 9
	m := decodeModel(t, "gru", V, 4)
	rng := rand.New(rand.NewPCG(7, 7))
	for _, p := range []float64{0.3, 0.6, 0.9, 0.99} {
		sp, err := NewSampler(Sampling{Temperature: 1, TopP: p}, rand.New(rand.NewPCG(1, uint64(p*100))))
		if err != nil {
			t.Fatal(err)
		}
		for state := 0; state < 20; state++ {
			prompt := make([]int, 1+rng.IntN(8))
			for i := range prompt {
				prompt[i] = rng.IntN(V)
			}
			d := nextDist(t, m, prompt)
			probs := softmaxTempered(d, 1)
			order := make([]int, V)
			for j := range order {
				order[j] = j
			}
			sort.Slice(order, func(a, b int) bool { return probs[order[a]] > probs[order[b]] })
			inside := make([]bool, V)
			var cum float64
			for _, j := range order {
				inside[j] = true
				if cum += probs[j]; cum >= p {
					break
				}
			}
			seen := make([]bool, V)
			for i := 0; i < 500; i++ {
				j := sp.Draw(d)
				if !inside[j] {
					t.Fatalf("p=%v prompt %v: drew token %d (probability %.4f) outside the nucleus %v", p, prompt, j, probs[j], inside)
				}
				seen[j] = true
			}
			if !seen[order[0]] {
				t.Errorf("p=%v prompt %v: never drew the most probable token in 500 draws", p, prompt)
			}
		}
	}
}

// TestSamplingDeterministic checks that one seed gives bit-identical
// tokens and log-probabilities across runs and thread counts (1 and 2), and
// that another seed changes the sample.
func TestSamplingDeterministic(t *testing.T) {
	// Hidden 512: the recurrent product of one hypothesis (1×512 times
	// 512×2048) reaches linalg's parallelMinWork, so with 2 threads it is
	// really split.
	c := DefaultConfig()
	c.Layers, c.HiddenSize, c.EmbeddingSize = 1, 512, 16
	m, err := NewModel[float32](c, 30, 8)
	if err != nil {
		t.Fatal(err)
	}
	cfgs := []Sampling{{Temperature: 1}, {Temperature: 0.8, TopK: 10}, {Temperature: 1.2, TopP: 0.9}}
	for _, cfg := range cfgs {
		t.Run(fmt.Sprintf("t=%v/k=%d/p=%v", cfg.Temperature, cfg.TopK, cfg.TopP), func(t *testing.T) {
			m.SetPool(nil)
			ref := generateTokens(t, m, []int{4, 2}, cfg, 42, 60)
			again := generateTokens(t, m, []int{4, 2}, cfg, 42, 60)
			for _, threads := range []int{1, 2} {
				p := linalg.NewPool(threads)
				m.SetPool(p)
				got := generateTokens(t, m, []int{4, 2}, cfg, 42, 60)
				p.Close()
				m.SetPool(nil)
				if !sameTokens(got, ref) {
					t.Errorf("%d threads: sample differs from the single-goroutine one", threads)
				}
			}
			if !sameTokens(again, ref) {
				t.Errorf("second run differs")
			}
			other := generateTokens(t, m, []int{4, 2}, cfg, 43, 60)
			if slices.Equal(ids(other), ids(ref)) {
				t.Errorf("seeds 42 and 43 gave the same 60 tokens")
			}
		})
	}
}

func sameTokens(a, b []Token) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].ID != b[i].ID || math.Float64bits(a[i].LogProb) != math.Float64bits(b[i].LogProb) {
			return false
		}
	}
	return true
}

func TestGenerateStops(t *testing.T) {
	m := decodeModel(t, "rnn", 6, 3)
	sp, _ := NewSampler(Sampling{Temperature: 1}, rand.New(rand.NewPCG(3, 3)))
	s := m.NewStream(1)
	var got []int
	n, err := Generate(context.Background(), s, sp, 100, func(tk Token) (bool, error) {
		got = append(got, tk.ID)
		return len(got) == 5, nil
	})
	if err != nil || n != 5 || len(got) != 5 {
		t.Fatalf("got %d tokens %v (err %v), want 5", n, got, err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Generate(ctx, m.NewStream(1), sp, 10, func(Token) (bool, error) { return false, nil }); err != context.Canceled {
		t.Errorf("cancelled context: got %v, want context.Canceled", err)
	}
}

func TestSamplingValidate(t *testing.T) {
	for _, tc := range []struct {
		cfg Sampling
		ok  bool
	}{
		{Sampling{Temperature: 1}, true},
		{Sampling{Temperature: 0}, true},
		{Sampling{Temperature: 1, TopK: 3, TopP: 0.5}, true},
		{Sampling{Temperature: -1}, false},
		{Sampling{Temperature: math.NaN()}, false},
		{Sampling{Temperature: math.Inf(1)}, false},
		{Sampling{Temperature: 1, TopK: -2}, false},
		{Sampling{Temperature: 1, TopP: 1.5}, false},
		{Sampling{Temperature: 1, TopP: -0.1}, false},
	} {
		if err := tc.cfg.Validate(); (err == nil) != tc.ok {
			t.Errorf("%+v: got error %v, want ok=%v", tc.cfg, err, tc.ok)
		}
	}
	if _, err := NewSampler(Sampling{Temperature: 1}, nil); err == nil {
		t.Errorf("NewSampler at temperature 1 without a generator: got no error")
	}
}

var sinkTokens int

// BenchmarkGenerate measures sampling throughput for one stream (tokens/s):
// one forward step, the distribution and one draw per token.
func BenchmarkGenerate(b *testing.B) {
	for _, sh := range []struct {
		layers, hidden, threads int
	}{{1, 256, 1}, {2, 512, 1}, {2, 512, 2}} {
		b.Run(fmt.Sprintf("lstm/vocab=96/embed=64/layers=%d/hidden=%d/threads=%d", sh.layers, sh.hidden, sh.threads), func(b *testing.B) {
			c := DefaultConfig()
			c.Layers, c.HiddenSize, c.EmbeddingSize = sh.layers, sh.hidden, 64
			m, err := NewModel[float32](c, 96, 1)
			if err != nil {
				b.Fatal(err)
			}
			if sh.threads > 1 {
				p := linalg.NewPool(sh.threads)
				defer p.Close()
				m.SetPool(p)
			}
			sp, _ := NewSampler(Sampling{Temperature: 1, TopP: 0.95}, rand.New(rand.NewPCG(1, 2)))
			s := m.NewStream(1)
			const perRun = 256
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				s.Reset()
				n, err := Generate(context.Background(), s, sp, perRun, func(Token) (bool, error) { return false, nil })
				if err != nil {
					b.Fatal(err)
				}
				sinkTokens += n
			}
			b.ReportMetric(float64(b.N*perRun)/b.Elapsed().Seconds(), "tokens/s")
		})
	}
}

var sinkDraw int

// BenchmarkDraw measures one draw from a fixed distribution, for a
// character-sized and a word-sized vocabulary.
func BenchmarkDraw(b *testing.B) {
	for _, V := range []int{96, 50000} {
		for _, cfg := range []struct {
			name string
			s    Sampling
		}{{"plain", Sampling{Temperature: 1}}, {"top-k=40", Sampling{Temperature: 1, TopK: 40}}, {"top-p=0.9", Sampling{Temperature: 1, TopP: 0.9}}} {
			b.Run(fmt.Sprintf("vocab=%d/%s", V, cfg.name), func(b *testing.B) {
				rng := rand.New(rand.NewPCG(1, 1))
				logp := make([]float64, V)
				for j := range logp { // a Zipf-like distribution, as text has
					logp[j] = -math.Log(float64(j+1)) + 0.1*rng.NormFloat64()
				}
				z := math.Inf(-1)
				for _, l := range logp {
					z = math.Max(z, l)
				}
				var s float64
				for _, l := range logp {
					s += math.Exp(l - z)
				}
				for j := range logp {
					logp[j] -= z + math.Log(s)
				}
				sp, _ := NewSampler(cfg.s, rand.New(rand.NewPCG(2, 2)))
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					sinkDraw += sp.Draw(logp)
				}
			})
		}
	}
}
