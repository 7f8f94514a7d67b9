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

// MinBootstrapBlocks is the fewest blocks a held-out text must hold for
// Compare to give intervals at the configured block length; below it the
// blocks are shrunk (PlanBlocks). It is weft's own choice: with fewer
// blocks the resamples take few distinct values and the percentile
// interval is too coarse to read.
const MinBootstrapBlocks = 20

// unitsPerBlock is the number of start positions per block length: block
// starts fall on units of ceil(BlockChars/unitsPerBlock) characters.
const unitsPerBlock = 32

// PlanBlocks returns the block length in characters for a bootstrap over
// a held-out text of chars characters when blockChars is configured: the
// configured length when the text holds at least MinBootstrapBlocks
// blocks; else chars/MinBootstrapBlocks (rounded down) with a note saying
// that the blocks were shrunk; and 0 with a note saying why when the text
// has fewer than MinBootstrapBlocks characters (no interval then).
func PlanBlocks(chars, blockChars int) (int, string) {
	if chars >= MinBootstrapBlocks*blockChars {
		return blockChars, ""
	}
	b := chars / MinBootstrapBlocks
	if b < 1 {
		return 0, fmt.Sprintf("no intervals: the held-out text has %d characters, fewer than the %d blocks of one character a bootstrap needs", chars, MinBootstrapBlocks)
	}
	return b, fmt.Sprintf("blocks shrunk from %d to %d characters so that the %d-character held-out text holds %d of them; intervals may be too narrow if errors are correlated over longer stretches",
		blockChars, b, chars, MinBootstrapBlocks)
}

// Bootstrap computes, by a paired moving-block bootstrap (Künsch 1989,
// "The jackknife and the bootstrap for general stationary observations",
// Annals of Statistics 17), intervals for every series' bits per
// character and for its difference from the series ref (the reference,
// such as the best baseline).
//
// The held-out text of C characters is cut into n = ceil(C/U) units of
// U = ceil(BlockChars/32) characters; a token belongs to the unit holding
// its first character. A block is l = max(1, round(BlockChars/U))
// consecutive units, so about BlockChars characters, and may start at any
// unit 0..n-l: the blocks overlap, which is what makes the bootstrap
// "moving" (Carlstein's 1986 scheme instead cuts the text into fixed,
// non-overlapping blocks). Each resample draws k = ceil(n/l) block starts
// uniformly with replacement from a generator seeded by cfg.Seed, and
// every series is scored on the same drawn blocks (the pairing):
//
//	bpc*_m = Σ_blocks bits_m(block) / Σ_blocks chars(block)
//	diff*_m = bpc*_m - bpc*_ref
//
// The interval is the percentile interval of the resampled values, the
// (1-Level)/2 and (1+Level)/2 quantiles with linear interpolation between
// order statistics. Estimates are the values on the text itself. A series
// with an infinite score gives infinite bounds; a difference between two
// infinite scores is NaN. The text must hold at least one block (n ≥ l);
// Compare asks for MinBootstrapBlocks (PlanBlocks).
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
	unit := (cfg.BlockChars + unitsPerBlock - 1) / unitsPerBlock
	l := max(1, int(math.Round(float64(cfg.BlockChars)/float64(unit))))
	n := (total + unit - 1) / unit
	if n < l {
		return nil, nil, fmt.Errorf("bootstrap: a held-out text of %d characters is shorter than one block of %d", total, cfg.BlockChars)
	}
	// Prefix sums over the units of bits, characters and tokens given
	// probability zero for every series: cumBits[s][u] is the finite bits
	// of the tokens in units 0..u-1 (infinite bits are counted apart, so
	// that differences of the sums stay defined).
	cumBits := make([][]float64, len(series))
	cumChars := make([][]float64, len(series))
	cumInf := make([][]int, len(series))
	for s, sr := range series {
		bits := make([]float64, n+1)
		chars := make([]float64, n+1)
		inf := make([]int, n+1)
		off := 0
		for i, lp := range sr.LogProbs {
			u := min(off/unit, n-1)
			c := charsAt(sr.Chars, i)
			if math.IsInf(lp, -1) {
				inf[u+1]++
			} else {
				bits[u+1] -= lp / math.Ln2
			}
			chars[u+1] += float64(c)
			off += c
		}
		for u := 1; u <= n; u++ {
			bits[u] += bits[u-1]
			chars[u] += chars[u-1]
			inf[u] += inf[u-1]
		}
		cumBits[s], cumChars[s], cumInf[s] = bits, chars, inf
	}
	ratio := func(nInf int, nb, nc float64) float64 {
		if nInf > 0 {
			return math.Inf(1)
		}
		return nb / nc
	}
	point := make([]float64, len(series))
	for s := range series {
		point[s] = ratio(cumInf[s][n], cumBits[s][n], cumChars[s][n])
	}
	rng := rand.New(rand.NewPCG(cfg.Seed, 0x9b1c_57a3_e2d4_0f61))
	starts := make([]int, (n+l-1)/l)
	samples := make([][]float64, len(series))
	for s := range samples {
		samples[s] = make([]float64, cfg.Samples)
	}
	for k := range cfg.Samples {
		for b := range starts {
			starts[b] = rng.IntN(n - l + 1)
		}
		for s := range series {
			var nb, nc float64
			nInf := 0
			cb, cc, ci := cumBits[s], cumChars[s], cumInf[s]
			for _, u := range starts {
				nb += cb[u+l] - cb[u]
				nc += cc[u+l] - cc[u]
				nInf += ci[u+l] - ci[u]
			}
			samples[s][k] = ratio(nInf, nb, nc)
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
		own := slices.Clone(samples[s]) // quantile sorts: the resamples of s stay paired for the differences after it
		bpc[s] = Interval{point[s], quantile(own, lo), quantile(own, hi)}
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
