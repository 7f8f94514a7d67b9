package eval

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// noisyScores returns per-character log-probabilities of a made-up model
// whose bits per character are about mean, with runs of correlated
// difficulty.
func noisyScores(rng *rand.Rand, n int, mean float64) []float64 {
	lp := make([]float64, n)
	hard := 0.0
	for i := range lp {
		if i%50 == 0 {
			hard = rng.Float64() - 0.5
		}
		bits := max(0.01, mean+hard+0.5*(rng.Float64()-0.5))
		lp[i] = -bits * math.Ln2
	}
	return lp
}

func TestBootstrap(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	cfg := BootstrapConfig{Samples: 400, BlockChars: 200, Level: 0.95, Seed: 42}
	a := noisyScores(rng, 20000, 2.0)
	b := noisyScores(rng, 20000, 2.2)
	series := []Series{{LogProbs: a}, {LogProbs: b}}
	bpc, diff, err := Bootstrap(series, 1, cfg)
	if err != nil {
		t.Fatal(err)
	}
	for s, iv := range bpc {
		r := NewResult("x", "test", "test", series[s].LogProbs, len(series[s].LogProbs))
		checkClose(t, "point estimate is the text's bits per char", iv.Estimate, r.BitsPerChar, 1e-12)
		if !(iv.Low <= iv.Estimate && iv.Estimate <= iv.High) {
			t.Errorf("series %d: interval [%g, %g] does not contain %g", s, iv.Low, iv.High, iv.Estimate)
		}
	}
	// The difference's estimate against bits summed here: Σ(-ln p)/ln 2
	// over each text of 20,000 characters.
	var bitsA, bitsB float64
	for i := range a {
		bitsA -= a[i] / math.Ln2
		bitsB -= b[i] / math.Ln2
	}
	checkClose(t, "difference estimate", diff[0].Estimate, (bitsA-bitsB)/20000, 1e-12)
	if !(diff[0].Low <= diff[0].Estimate && diff[0].Estimate <= diff[0].High) {
		t.Errorf("difference interval %+v does not hold its estimate", diff[0])
	}
	if !(diff[0].High < 0) {
		t.Errorf("a is better by about 0.2 bits: difference interval %+v should lie below 0", diff[0])
	}
	// Deterministic for a seed, different for another.
	bpc2, _, _ := Bootstrap(series, 1, cfg)
	if bpc2[0] != bpc[0] {
		t.Errorf("same seed: got %+v and %+v", bpc[0], bpc2[0])
	}
	cfg3 := cfg
	cfg3.Seed = 43
	bpc3, _, _ := Bootstrap(series, 1, cfg3)
	if bpc3[0] == bpc[0] {
		t.Errorf("another seed gave the identical interval %+v", bpc3[0])
	}
	// More data narrows the interval: 16 times the text, about a quarter
	// of the width (width ∝ 1/sqrt(blocks)); require at least halving.
	long := noisyScores(rng, 320000, 2.0)
	bl, _, err := Bootstrap([]Series{{LogProbs: long}}, 0, cfg)
	if err != nil {
		t.Fatal(err)
	}
	w, wl := bpc[0].High-bpc[0].Low, bl[0].High-bl[0].Low
	if !(wl < w/2) {
		t.Errorf("interval width with 16× the data: got %g, want below half of %g", wl, w)
	}
	// Pairing: a model that is the reference plus a constant 0.1 bits per
	// character has a difference interval of exactly that constant.
	shift := make([]float64, len(b))
	for i := range b {
		shift[i] = b[i] - 0.1*math.Ln2
	}
	_, d, err := Bootstrap([]Series{{LogProbs: shift}, {LogProbs: b}}, 1, cfg)
	if err != nil {
		t.Fatal(err)
	}
	checkClose(t, "paired shift low", d[0].Low, 0.1, 1e-9)
	checkClose(t, "paired shift high", d[0].High, 0.1, 1e-9)
}

func TestBootstrapAcrossTokenizations(t *testing.T) {
	// A word model and a character model of the same 12 characters; blocks
	// are in characters, so both can be resampled together.
	word := Series{LogProbs: []float64{-1, -2, -3, -0.5}, Chars: []int{3, 4, 4, 1}}
	char := Series{LogProbs: make([]float64, 12)}
	for i := range char.LogProbs {
		char.LogProbs[i] = -0.5
	}
	bpc, _, err := Bootstrap([]Series{word, char}, 1, BootstrapConfig{Samples: 50, BlockChars: 4, Level: 0.9, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	checkClose(t, "word bpc", bpc[0].Estimate, 6.5/math.Ln2/12, 1e-14)
	bad := Series{LogProbs: []float64{-1}, Chars: []int{5}}
	if _, _, err := Bootstrap([]Series{word, bad}, 0, BootstrapConfig{Samples: 5, BlockChars: 4, Level: 0.9}); err == nil {
		t.Error("series of different lengths in characters gave no error")
	}
	// An infinite row keeps infinite bounds.
	inf := Series{LogProbs: []float64{math.Inf(-1), -1, -1, -1}, Chars: []int{3, 4, 4, 1}}
	bpc, _, err = Bootstrap([]Series{inf, word}, 1, BootstrapConfig{Samples: 20, BlockChars: 4, Level: 0.9, Seed: 2})
	if err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(bpc[0].Estimate, 1) || !math.IsInf(bpc[0].High, 1) {
		t.Errorf("infinite series: got %+v", bpc[0])
	}
}

func TestBootstrapMasked(t *testing.T) {
	// The masked series' estimate is the marked positions' bits per
	// character of Marked, and its interval contains it.
	rng := rand.New(rand.NewPCG(9, 9))
	lp := noisyScores(rng, 5000, 2)
	mask := make([]bool, len(lp))
	for i := range mask {
		mask[i] = i%7 == 3
	}
	in, _ := Marked(lp, nil, mask)
	bpc, _, err := Bootstrap([]Series{Series{LogProbs: lp}.Masked(mask)}, 0, BootstrapConfig{Samples: 200, BlockChars: 50, Level: 0.95, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	checkClose(t, "masked estimate", bpc[0].Estimate, in.BitsPerChar, 1e-12)
	if !(bpc[0].Low < in.BitsPerChar && in.BitsPerChar < bpc[0].High) {
		t.Errorf("masked interval %+v does not contain %g", bpc[0], in.BitsPerChar)
	}
}

// TestBootstrapBlocksMove: the blocks may start anywhere, not only at
// multiples of the block length (Künsch 1989's moving blocks; issue 11,
// defect 9: the blocks were fixed). The text alternates two patterns of
// one block length each, 2 2 1 1 | 1 1 2 2, so that every fixed block
// holds 6 bits and fixed blocks give every resample the same value (an
// interval of width zero), while blocks starting at other positions hold
// 4 to 8 bits.
func TestBootstrapBlocksMove(t *testing.T) {
	pattern := []float64{2, 2, 1, 1, 1, 1, 2, 2} // bits per character
	lp := make([]float64, 20*len(pattern))
	for i := range lp {
		lp[i] = -pattern[i%len(pattern)] * math.Ln2
	}
	// Blocks of 4 characters: units of ceil(4/32) = 1 character, so a
	// block may start at any character.
	bpc, _, err := Bootstrap([]Series{{LogProbs: lp}}, 0, BootstrapConfig{Samples: 500, BlockChars: 4, Level: 0.95, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	checkClose(t, "estimate", bpc[0].Estimate, 1.5, tolExact)
	if !(bpc[0].High-bpc[0].Low > 0.05) {
		t.Errorf("interval %+v has (nearly) no width: the blocks do not move", bpc[0])
	}
}

func TestPlanBlocks(t *testing.T) {
	for _, tc := range []struct {
		chars, block, want int
		note               string
	}{
		{40000, 2000, 2000, ""},       // 20 blocks: as configured
		{39999, 2000, 1999, "shrunk"}, // 19.99 blocks: shrunk to chars/20
		{600, 2000, 30, "shrunk"},
		{20, 2000, 1, "shrunk"},
		{19, 2000, 0, "no intervals"},
	} {
		got, note := PlanBlocks(tc.chars, tc.block)
		if got != tc.want || !strings.Contains(note, tc.note) || (tc.note == "") != (note == "") {
			t.Errorf("PlanBlocks(%d, %d): got %d %q, want %d and a note with %q", tc.chars, tc.block, got, note, tc.want, tc.note)
		}
	}
}

// TestBootstrapPairingAfterReference: the differences of series listed
// after the reference keep their pairing. A copy of another series has
// exactly that series' difference interval wherever it is listed, and a
// copy of the reference a difference of exactly zero in every resample.
// (Found while writing issue 11's tables: the reference's resamples were
// sorted in place for its own interval, so every series listed after it
// was differenced against sorted values; two identical models in the word
// table had difference intervals [+1.272, +1.320] and [+1.220, +1.368].)
func TestBootstrapPairingAfterReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	a := noisyScores(rng, 20000, 2.0)
	ref := noisyScores(rng, 20000, 2.2)
	series := []Series{{LogProbs: a}, {LogProbs: ref}, {LogProbs: a}, {LogProbs: ref}}
	_, diff, err := Bootstrap(series, 1, BootstrapConfig{Samples: 300, BlockChars: 200, Level: 0.95, Seed: 4})
	if err != nil {
		t.Fatal(err)
	}
	if diff[2] != diff[0] {
		t.Errorf("a listed after the reference: difference %+v, listed before: %+v", diff[2], diff[0])
	}
	if d := diff[3]; d.Estimate != 0 || d.Low != 0 || d.High != 0 {
		t.Errorf("a copy of the reference listed after it: difference %+v, want all zero", d)
	}
}
