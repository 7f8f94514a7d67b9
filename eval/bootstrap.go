package eval

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// BootstrapConfig sets the block bootstrap of Bootstrap.
type BootstrapConfig struct {
	// Samples is the number of resamples, at least 1. 1000 is usual.
	Samples int
	// BlockChars is the block length in characters of the held-out text,
	// at least 1; a token belongs to the block holding its first character.
	BlockChars int
	// Level is the interval's coverage, such as 0.95.
	Level float64
	// Seed seeds the resampling; the same seed gives the same intervals.
	Seed uint64
}

// Interval is a point estimate with its bootstrap interval.
type Interval struct {
	Estimate, Low, High float64
}

// Series is one model's per-token scores on a held-out text: the natural
// log-probabilities and the characters each token spans (nil: one each).
// Models of different tokenizations can be compared as long as their
// texts have the same number of characters.
type Series struct {
	LogProbs []float64
	Chars    []int
}

// Bootstrap computes, by a paired moving-block bootstrap, intervals for
// every series' bits per character and for its difference from the
// series ref (the reference, such as the best baseline).
//
// The held-out text is cut into B = ceil(characters/BlockChars)
// contiguous blocks. Each resample draws B block indices uniformly with
// replacement from a generator seeded by cfg.Seed, and every series is
// scored on the same drawn blocks (the pairing):
//
//	bpc*_m = Σ_b bits_m(block b) / Σ_b chars(block b)
//	diff*_m = bpc*_m - bpc*_ref
//
// The interval is the percentile interval of the resampled values, the
// (1-Level)/2 and (1+Level)/2 quantiles with linear interpolation between
// order statistics. Estimates are the values on the text itself. A series
// with an infinite score gives infinite bounds; a difference between two
// infinite scores is NaN. The difference of the reference from itself is
// exactly zero.
func Bootstrap(series []Series, ref int, cfg BootstrapConfig) (bpc, diff []Interval, err error) {
	if len(series) == 0 {
		return nil, nil, errors.New("bootstrap: no series")
	}
	if ref < 0 || ref >= len(series) {
		return nil, nil, fmt.Errorf("bootstrap: reference %d outside 0..%d", ref, len(series)-1)
	}
	if cfg.Samples < 1 || cfg.BlockChars < 1 || !(cfg.Level > 0 && cfg.Level < 1) {
		return nil, nil, fmt.Errorf("bootstrap: bad settings (samples %d, block %d characters, level %g)", cfg.Samples, cfg.BlockChars, cfg.Level)
	}
	// Per-block sums of bits and characters for every series.
	bits := make([][]float64, len(series))
	chars := make([][]float64, len(series))
	total := -1
	for s, sr := range series {
		if sr.Chars != nil && len(sr.Chars) != len(sr.LogProbs) {
			return nil, nil, fmt.Errorf("bootstrap: series %d has %d log-probabilities but %d character counts", s, len(sr.LogProbs), len(sr.Chars))
		}
		n := 0
		for i := range sr.LogProbs {
			n += charsAt(sr.Chars, i)
		}
		if total >= 0 && n != total {
			return nil, nil, fmt.Errorf("bootstrap: series %d covers %d characters, series 0 %d", s, n, total)
		}
		total = n
	}
	if total == 0 {
		return nil, nil, errors.New("bootstrap: the held-out text has no characters")
	}
	B := (total + cfg.BlockChars - 1) / cfg.BlockChars
	for s, sr := range series {
		bits[s] = make([]float64, B)
		chars[s] = make([]float64, B)
		off := 0
		for i, lp := range sr.LogProbs {
			b := min(off/cfg.BlockChars, B-1)
			c := charsAt(sr.Chars, i)
			bits[s][b] -= lp / math.Ln2
			chars[s][b] += float64(c)
			off += c
		}
	}
	point := make([]float64, len(series))
	for s := range series {
		var nb, nc float64
		for b := range B {
			nb += bits[s][b]
			nc += chars[s][b]
		}
		point[s] = nb / nc
	}
	rng := rand.New(rand.NewPCG(cfg.Seed, 0x9b1c_57a3_e2d4_0f61))
	draws := make([]int, B)
	samples := make([][]float64, len(series))
	for s := range samples {
		samples[s] = make([]float64, cfg.Samples)
	}
	for k := range cfg.Samples {
		for b := range draws {
			draws[b] = rng.IntN(B)
		}
		for s := range series {
			var nb, nc float64
			for _, b := range draws {
				nb += bits[s][b]
				nc += chars[s][b]
			}
			samples[s][k] = nb / nc
		}
	}
	lo, hi := (1-cfg.Level)/2, (1+cfg.Level)/2
	bpc = make([]Interval, len(series))
	diff = make([]Interval, len(series))
	d := make([]float64, cfg.Samples)
	for s := range series {
		for k := range d {
			d[k] = samples[s][k] - samples[ref][k]
		}
		diff[s] = Interval{point[s] - point[ref], quantile(d, lo), quantile(d, hi)}
		bpc[s] = Interval{point[s], quantile(samples[s], lo), quantile(samples[s], hi)}
	}
	return bpc, diff, nil
}

// quantile returns the q-quantile of x (sorted in place), interpolating
// linearly between order statistics; NaN if any value is NaN.
func quantile(x []float64, q float64) float64 {
	slices.Sort(x)
	if len(x) == 0 || math.IsNaN(x[0]) {
		return math.NaN()
	}
	pos := q * float64(len(x)-1)
	i := int(pos)
	if i >= len(x)-1 {
		return x[len(x)-1]
	}
	f := pos - float64(i)
	if f == 0 || x[i] == x[i+1] {
		return x[i]
	}
	return x[i] + f*(x[i+1]-x[i])
}

// Masked returns the series restricted to the tokens where mask is true:
// the others keep their places but count zero bits over zero characters.
// Bootstrap on masked series (the same mask for every model) gives
// intervals for the bits per character of the marked positions, such as
// the demo corpus's long-range positions; its blocks are then BlockChars
// marked characters long.
func (s Series) Masked(mask []bool) Series {
	if len(mask) != len(s.LogProbs) {
		panic("eval: Series.Masked: len(mask) != len(LogProbs)")
	}
	out := Series{LogProbs: make([]float64, len(s.LogProbs)), Chars: make([]int, len(s.LogProbs))}
	for i, m := range mask {
		if m {
			out.LogProbs[i] = s.LogProbs[i]
			out.Chars[i] = charsAt(s.Chars, i)
		}
	}
	return out
}
