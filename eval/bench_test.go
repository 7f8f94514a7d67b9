package eval

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"
	"unicode"

	"weft/data/corpustest"
)

// Package-level sinks keep the compiler from discarding benchmark work.
var (
	sinkCounts *Counts
	sinkFloat  float64
)

// sotuText returns the State of the Union addresses, one address a line,
// in file-name (chronological) order.
func sotuText(b testing.TB) string {
	b.Helper()
	dir := corpustest.SOTU(b)
	names, err := filepath.Glob(filepath.Join(dir, "*.txt"))
	if err != nil || len(names) == 0 {
		b.Fatalf("no addresses in %s", dir)
	}
	sort.Strings(names)
	var sb strings.Builder
	for _, n := range names {
		t, err := os.ReadFile(n)
		if err != nil {
			b.Fatal(err)
		}
		sb.Write(t)
		sb.WriteByte('\n')
	}
	return sb.String()
}

// sotuWords splits the addresses into lower-cased words and single
// punctuation marks by a plain loop over the runes, with "\n" (id 0) as
// the boundary token ending each address.
func sotuWords(b testing.TB) ([]int, int) {
	text := sotuText(b)
	ids := map[string]int{"\n": 0}
	var seq []int
	var word []rune
	flush := func() {
		if len(word) > 0 {
			s := string(word)
			id, ok := ids[s]
			if !ok {
				id = len(ids)
				ids[s] = id
			}
			seq = append(seq, id)
			word = word[:0]
		}
	}
	for _, r := range text {
		switch {
		case r == '\n':
			flush()
			seq = append(seq, 0)
		case unicode.IsSpace(r):
			flush()
		case unicode.IsLetter(r) || unicode.IsDigit(r) || r == '\'':
			word = append(word, unicode.ToLower(r))
		default:
			flush()
			word = append(word, r)
			flush()
		}
	}
	flush()
	return seq, len(ids)
}

// chars maps the runes of text to ids in order of first sight.
func chars(text string) ([]int, int) {
	ids := map[rune]int{}
	var seq []int
	for _, r := range text {
		id, ok := ids[r]
		if !ok {
			id = len(ids)
			ids[r] = id
		}
		seq = append(seq, id)
	}
	return seq, len(ids)
}

type ngramBench struct {
	name        string
	train, test []int
	vocab       int
	order       int
	boundary    int
	method      Method
}

func ngramBenches(b *testing.B) []ngramBench {
	words, wv := sotuWords(b)
	text, cv := chars(sotuText(b))
	const wordTrain, wordTest = 1_000_000, 100_000
	const charTrain, charTest = 5_000_000, 200_000
	if len(words) < wordTrain+wordTest || len(text) < charTrain+charTest {
		b.Fatalf("corpus too small: %d words, %d characters", len(words), len(text))
	}
	return []ngramBench{
		{"words/tokens=1M/order=5/smoother=modified_kneser_ney", words[:wordTrain], words[wordTrain : wordTrain+wordTest], wv, 5, 0, ModifiedKneserNey},
		{"chars/tokens=5M/order=8/smoother=modified_kneser_ney", text[:charTrain], text[charTrain : charTrain+charTest], cv, 8, NoBoundary, ModifiedKneserNey},
	}
}

// BenchmarkFitNGram counts the n-grams of the training split and builds
// the smoothed model: the State of the Union addresses (corpustest.SOTU),
// 1M word tokens for the 5-gram word model and their first 5M
// characters for the 8-gram character model.
func BenchmarkFitNGram(b *testing.B) {
	for _, bb := range ngramBenches(b) {
		b.Run(bb.name, func(b *testing.B) {
			b.ReportAllocs()
			var c *Counts
			for b.Loop() {
				var err error
				c, err = CountNGrams(bb.train, bb.vocab, bb.order, bb.boundary, nil)
				if err != nil {
					b.Fatal(err)
				}
				if _, err := NewNGram(c, bb.order, Smoothing{Method: bb.method}); err != nil {
					b.Fatal(err)
				}
			}
			sinkCounts = c
			b.ReportMetric(float64(c.Bytes())/1e6, "MB-counts")
			b.ReportMetric(float64(c.Events()), "ngrams")
		})
	}
}

// BenchmarkScoreNGram scores the held-out tokens following the training
// split (100k words, 200k characters) with the model of BenchmarkFitNGram.
func BenchmarkScoreNGram(b *testing.B) {
	for _, bb := range ngramBenches(b) {
		b.Run(bb.name, func(b *testing.B) {
			c, err := CountNGrams(bb.train, bb.vocab, bb.order, bb.boundary, nil)
			if err != nil {
				b.Fatal(err)
			}
			m, err := NewNGram(c, bb.order, Smoothing{Method: bb.method})
			if err != nil {
				b.Fatal(err)
			}
			lp := make([]float64, len(bb.test))
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				if err := m.LogProbs(context.Background(), lp, bb.test); err != nil {
					b.Fatal(err)
				}
			}
			r := NewResult(m.Name(), "ngram", "test", lp, len(bb.test))
			sinkFloat = r.BitsPerToken
			b.ReportMetric(r.BitsPerToken, "bits/token")
			b.ReportMetric(float64(len(bb.test))*float64(b.N)/b.Elapsed().Seconds(), "tokens/s")
		})
	}
}

// BenchmarkBaumWelch times one Baum-Welch iteration on the first 1M
// characters of Moby-Dick (83 symbols) from a seeded start. GFLOP/s
// counts 8·N²·T floating-point operations an iteration: 2·N²·T for each
// of the forward pass, its recomputation in the backward sweep, the
// backward pass and the expected transition counts (terms of order N·T
// left out).
func BenchmarkBaumWelch(b *testing.B) {
	seq, V := mobyDick(b)
	seq = seq[:1_000_000]
	for _, n := range []int{64, 256} {
		b.Run(fmt.Sprintf("states=%d/symbols=1M", n), func(b *testing.B) {
			h := &HMM{n: n, v: V, boundary: NoBoundary}
			h.initRandom(seq, 1)
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				ll, err := h.Iterate(context.Background(), seq, 2)
				if err != nil {
					b.Fatal(err)
				}
				sinkFloat = ll
			}
			flops := 8 * float64(n) * float64(n) * float64(len(seq))
			b.ReportMetric(flops*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}

// BenchmarkCountBudget counts the 8-grams of Moby-Dick's 1.19 M
// characters without a memory budget and under one they fit (1 GiB, the
// default of evaluation.ngram_memory), so the cost of the budget's check
// before each token shows as the ratio of the two.
func BenchmarkCountBudget(b *testing.B) {
	seq, V := mobyDick(b)
	for _, m := range []struct {
		name   string
		memory int64
	}{{"none", 0}, {"1GiB", 1 << 30}} {
		b.Run("memory="+m.name, func(b *testing.B) {
			var c *Counts
			for b.Loop() {
				var err error
				c, err = CountNGramsOf(IntTokens(seq), V, 8, NoBoundary, CountOptions{Memory: m.memory})
				if err != nil {
					b.Fatal(err)
				}
			}
			sinkCounts = c
			b.ReportMetric(float64(len(seq))*float64(b.N)/b.Elapsed().Seconds(), "tokens/s")
		})
	}
}
