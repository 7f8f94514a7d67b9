package rnn

import (
	"context"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"weft/data/corpustest"
)

// normTol bounds |Σ_w P(w) − 1| in float64 (the issue asks for 1e-9).
const normTol = 1e-9

func TestFrequencyClasses(t *testing.T) {
	// Boundaries derived by hand from the rule in FrequencyClasses' doc
	// comment: class k starts at the first id i > start[k−1] whose count
	// of earlier tokens S(i) reaches k·N/C.
	for _, tc := range []struct {
		name    string
		counts  []int64
		classes int
		want    []int
	}{
		// N = 20: S = 0, 0, 10, ...; class 1 starts where S reaches 10.
		{"halves", []int64{0, 10, 5, 3, 1, 1}, 2, []int{0, 2, 6}},
		// No counts: every id weighs 1, classes of equal size.
		{"uniform", make([]int64, 6), 3, []int{0, 2, 4, 6}},
		// One id holds most of the mass: every class still gets an id.
		{"dominant", []int64{100, 1, 1, 1}, 3, []int{0, 1, 2, 4}},
		// N = 16, C = 4: S = 0, 8, 12, 14, 15: thresholds 4, 8, 12.
		{"zipf-like", []int64{8, 4, 2, 1, 1}, 4, []int{0, 1, 2, 3, 5}},
		{"one class", []int64{3, 2, 1}, 1, []int{0, 3}},
		{"one id per class", []int64{3, 2, 1}, 3, []int{0, 1, 2, 3}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got := FrequencyClasses(tc.counts, tc.classes)
			if len(got) != len(tc.want) {
				t.Fatalf("got %v, want %v", got, tc.want)
			}
			for i := range got {
				if got[i] != tc.want[i] {
					t.Fatalf("got %v, want %v", got, tc.want)
				}
			}
		})
	}
}

// classModel is a small float64 model with the class layer over V ids with
// Zipf-like counts, non-zero biases and a projection.
func classModel(t testing.TB, cell string, V, classes int, seed uint64) *Model[float64] {
	t.Helper()
	c := DefaultConfig()
	c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize, c.ProjectionSize = cell, 2, 12, 6, 5
	c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.4, "uniform"
	c.OutputLayer, c.OutputClasses = "class", classes
	counts := make([]int64, V)
	for i := range counts {
		counts[i] = int64(1000 / (i + 1))
	}
	m, err := NewModelWithCounts[float64](c, counts, seed)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 5))
	for i := range m.outB {
		m.outB[i] = rng.Float64() - 0.5
	}
	for i := range m.classB {
		m.classB[i] = rng.Float64() - 0.5
	}
	return m
}

// TestClassDistribution checks the Stream's distribution against the
// factorisation written out here from the last layer's output p:
// P(w) = softmax(W_c p + b_c)[c(w)] · softmax over class c(w) of (W_y p + b_y)
// (Goodman 2001, eq. 1), and that it sums to 1.
func TestClassDistribution(t *testing.T) {
	const V = 40
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		t.Run(cell, func(t *testing.T) {
			m := classModel(t, cell, V, 6, 2)
			starts := m.OutputClasses()
			if len(starts) != 7 || starts[0] != 0 || starts[6] != V {
				t.Fatalf("class boundaries %v", starts)
			}
			s := m.NewStream(2)
			dist := make([]float64, 2*V)
			rng := rand.New(rand.NewPCG(1, 2))
			K := m.outIn
			for step := 0; step < 12; step++ {
				s.LogProbs(dist)
				for i := 0; i < 2; i++ {
					var sum float64
					for _, v := range dist[i*V : (i+1)*V] {
						sum += math.Exp(v)
					}
					if math.Abs(sum-1) > normTol {
						t.Fatalf("step %d hypothesis %d: probabilities sum to 1%+.3g", step, i, sum-1)
					}
					// The output layer's input of this hypothesis (zero at the start).
					p := make([]float64, K)
					if step > 0 {
						copy(p, s.w.head[i*K:(i+1)*K])
					}
					dot := func(w []float64, b float64) float64 {
						for j, v := range p {
							b += w[j] * v
						}
						return b
					}
					C := len(starts) - 1
					cs := make([]float64, C)
					for k := range cs {
						cs[k] = dot(m.classW[k*K:(k+1)*K], m.classB[k])
					}
					for w := 0; w < V; w++ {
						k := sort.SearchInts(starts, w+1) - 1
						var z float64
						for v := starts[k]; v < starts[k+1]; v++ {
							z += math.Exp(dot(m.outW[v*K:(v+1)*K], m.outB[v]))
						}
						var zc float64
						for _, x := range cs {
							zc += math.Exp(x)
						}
						want := cs[k] - math.Log(zc) + dot(m.outW[w*K:(w+1)*K], m.outB[w]) - math.Log(z)
						if got := dist[i*V+w]; math.Abs(got-want) > 1e-12 {
							t.Fatalf("step %d hypothesis %d id %d: ln P %v, want %v", step, i, w, got, want)
						}
					}
				}
				if err := s.Feed([]int{rng.IntN(V), rng.IntN(V)}); err != nil {
					t.Fatal(err)
				}
			}
		})
	}
}

// TestClassLogProbsMatchesStream: scoring a sequence with LogProbs (grouped
// products over chunks) gives the Stream's distribution at every position,
// and its mean is the training loss of the same window.
func TestClassLogProbsMatchesStream(t *testing.T) {
	const V = 30
	seq := randomTokens(150, V, 8) // more than two scoring chunks
	m := classModel(t, "lstm", V, 0, 3)
	got := make([]float64, len(seq))
	if err := m.LogProbs(context.Background(), got, seq); err != nil {
		t.Fatal(err)
	}
	s := m.NewStream(1)
	dist := make([]float64, V)
	for i, tok := range seq {
		s.LogProbs(dist)
		if !closeTo(got[i], dist[tok], inferTol) {
			t.Fatalf("position %d: LogProbs %v, stream %v", i, got[i], dist[tok])
		}
		if err := s.Feed([]int{tok}); err != nil {
			t.Fatal(err)
		}
	}
	w := newWork(m, 1, len(seq)-1, true)
	w.forward(nil, seq[:len(seq)-1], len(seq)-1, false)
	total, n := w.loss(seq[1:])
	var sum float64
	for _, v := range got[1:] {
		sum -= v
	}
	if !closeTo(sum/float64(len(seq)-1), total/float64(n), 1e-12) {
		t.Errorf("mean −ln p %v, window loss %v", sum/float64(len(seq)-1), total/float64(n))
	}
	// Split scoring (SetScoring) takes the same class path.
	if err := m.SetScoring(3, 10); err != nil {
		t.Fatal(err)
	}
	split := make([]float64, len(seq))
	if err := m.LogProbs(context.Background(), split, seq); err != nil {
		t.Fatal(err)
	}
	for i, v := range split {
		if math.IsNaN(v) || v > 0 {
			t.Fatalf("split scoring position %d: ln P = %v", i, v)
		}
	}
}

// TestClassLimits: with one class, or one id per class, the factorisation
// reduces to a single softmax (P(c) = 1, or P(w | c) = 1), so the class
// model must equal the full-softmax model with the same weights.
func TestClassLimits(t *testing.T) {
	const V = 9
	seq := randomTokens(40, V, 3)
	full := inferModel(t, "gru")
	want := make([]float64, len(seq))
	if err := full.LogProbs(context.Background(), want, seq); err != nil {
		t.Fatal(err)
	}
	for _, classes := range []int{1, V} {
		c := full.Config()
		c.OutputLayer, c.OutputClasses = "class", classes
		m, err := NewModel[float64](c, V, 99)
		if err != nil {
			t.Fatal(err)
		}
		src := map[string][]float64{}
		for _, p := range full.Params() {
			src[p.Name] = p.Value
		}
		for _, p := range m.Params() {
			switch {
			case classes == V && p.Name == "output.class_weight":
				copy(p.Value, src["output.weight"])
			case classes == V && p.Name == "output.class_bias":
				copy(p.Value, src["output.bias"])
			case classes == V && strings.HasPrefix(p.Name, "output."):
				// The word softmax over one id is 1 whatever its weights.
			case p.Name == "output.class_weight" || p.Name == "output.class_bias":
				// One class: its probability is 1 whatever its weights.
			default:
				copy(p.Value, src[p.Name])
			}
		}
		got := make([]float64, len(seq))
		if err := m.LogProbs(context.Background(), got, seq); err != nil {
			t.Fatal(err)
		}
		for i := range got {
			if !closeTo(got[i], want[i], 1e-12) {
				t.Fatalf("classes=%d position %d: got %v, want %v (full softmax)", classes, i, got[i], want[i])
			}
		}
	}
}

// TestClassResume: the class layer's tensors go through the optimizer
// state like any other, so N steps, an export and N more steps equal 2N
// straight steps bit for bit.
func TestClassResume(t *testing.T) {
	tc := DefaultTrainConfig()
	tc.BatchSize, tc.UnrollSteps, tc.Seed = 3, 10, 5
	checkResume(t, smallConfigs()["lstm-class"], tc, randomTokens(6000, 12, 4), 5)
}

func TestClassConfigErrors(t *testing.T) {
	base := DefaultConfig()
	for _, tc := range []struct {
		name  string
		set   func(*Config)
		vocab int
		want  string
	}{
		{"bad layer", func(c *Config) { c.OutputLayer = "sampled" }, 10, "model.output_layer"},
		{"negative classes", func(c *Config) { c.OutputLayer, c.OutputClasses = "class", -1 }, 10, "model.output_classes"},
		{"classes without class layer", func(c *Config) { c.OutputClasses = 4 }, 10, "model.output_classes"},
		{"more classes than ids", func(c *Config) { c.OutputLayer, c.OutputClasses = "class", 11 }, 10, "model.output_classes (11) is more than the vocabulary's 10 entries"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := base
			tc.set(&c)
			_, err := NewModel[float32](c, tc.vocab, 1)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("got error %v, want one containing %q", err, tc.want)
			}
		})
	}
	c := base
	c.OutputLayer = "class"
	if _, err := NewModelWithCounts[float32](c, []int64{5, -1, 2}, 1); err == nil || !strings.Contains(err.Error(), "negative") {
		t.Fatalf("negative count: got error %v", err)
	}
	// Zero means about √V: 100 ids give 10 classes.
	m, err := NewModel[float32](c, 100, 1)
	if err != nil {
		t.Fatal(err)
	}
	if got := len(m.OutputClasses()) - 1; got != 10 {
		t.Errorf("output_classes = 0 with V = 100: %d classes, want 10", got)
	}
}

// TestClassLearnsWords trains a word model with the class layer on State
// of the Union addresses and requires its training loss to fall below the
// unigram cross-entropy of the same tokens (the entropy of the word
// frequencies, computed here): the factorised layer must learn context.
func TestClassLearnsWords(t *testing.T) {
	dir := corpustest.SOTU(t)
	files, err := filepath.Glob(filepath.Join(dir, "*.txt"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no State of the Union texts in %s (%v)", dir, err)
	}
	sort.Strings(files)
	var words []string
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		words = append(words, strings.Fields(strings.ToLower(string(b)))...)
		if len(words) > 60000 {
			break
		}
	}
	words = words[:60000]
	// Ids by decreasing count (ties by spelling), the 1,999 commonest words
	// plus id 0 for every other word, as data.Vocab orders them.
	freq := map[string]int64{}
	for _, w := range words {
		freq[w]++
	}
	kinds := make([]string, 0, len(freq))
	for w := range freq {
		kinds = append(kinds, w)
	}
	sort.Slice(kinds, func(i, j int) bool {
		if freq[kinds[i]] != freq[kinds[j]] {
			return freq[kinds[i]] > freq[kinds[j]]
		}
		return kinds[i] < kinds[j]
	})
	const V = 2000
	id := map[string]int{}
	for i, w := range kinds[:V-1] {
		id[w] = i + 1
	}
	tokens := make([]int, len(words))
	counts := make([]int64, V)
	for i, w := range words {
		tokens[i] = id[w] // 0 when not among the commonest
		counts[tokens[i]]++
	}
	var unigram float64 // nats per word
	for _, c := range counts {
		if c > 0 {
			p := float64(c) / float64(len(tokens))
			unigram -= p * math.Log(p)
		}
	}
	cfg := DefaultConfig()
	cfg.Cell, cfg.HiddenSize, cfg.EmbeddingSize = "lstm", 64, 32
	cfg.OutputLayer = "class"
	tc := DefaultTrainConfig()
	tc.Optimizer, tc.LearningRate, tc.BatchSize, tc.UnrollSteps = "adam", 0.01, 16, 20
	m, err := NewModelWithCounts[float32](cfg, counts, 1)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := NewTrainer(m, tc, nil)
	if err != nil {
		t.Fatal(err)
	}
	const maxSteps, window = 300, 20
	first, recent, steps := trainUntil(t, tr, tokens, tc, maxSteps, window, unigram-0.1)
	t.Logf("V=%d, %d classes, unigram %.4f nats/word; first step %.4f, mean of last %d steps %.4f after %d steps",
		V, len(m.OutputClasses())-1, unigram, first, len(recent), mean(recent), steps)
	// An untrained model is nearly uniform over the classes and within each
	// (common practice: small weights, zero biases), so it gives id w about
	// 1/(C·|c(w)|) and the first loss is about Σ_w p(w)·ln(C·|c(w)|) with
	// p the unigram frequencies (derived here; below ln V, since the
	// frequent ids sit in small classes).
	starts := m.OutputClasses()
	C := len(starts) - 1
	var start float64
	for k := 0; k < C; k++ {
		for w := starts[k]; w < starts[k+1]; w++ {
			start += float64(counts[w]) / float64(len(tokens)) * math.Log(float64(C*(starts[k+1]-starts[k])))
		}
	}
	if math.Abs(first-start) > 0.3 {
		t.Errorf("first loss %.4f, want about %.4f", first, start)
	}
	if mean(recent) >= unigram-0.1 {
		t.Errorf("after %d steps the training loss is %.4f nats/word, not 0.1 below the unigram's %.4f", steps, mean(recent), unigram)
	}
}
