package report

import (
	"context"
	"fmt"
	"math"
	"sort"

	"weft/checkpoint"
	"weft/checkpoint/generate"
	"weft/checkpoint/runs"
	"weft/data"
	"weft/eval"
	"weft/rnn"
)

// Surprisal-view constants.
const (
	// BlockChars is the least length of a block of the surprisal view.
	BlockChars = 2000
	// WarmupTokens is how many tokens before the block the model reads
	// to make its top five predictions.
	WarmupTokens = 1000
	// TopK is the number of predictions shown on hover.
	TopK = 5
)

// Sample settings: two temperatures, a fixed seed and length.
var (
	SampleTemperatures = []float64{0.7, 1.0}
	SampleSeed         = uint64(1)
	SampleChars        = 400
)

// Options say how Build makes the parts that need the model.
type Options struct {
	// Model is the recurrent model (the run's best checkpoint); nil leaves
	// out the surprisal view and the samples.
	Model *checkpoint.Model
	// Data is the run's prepared dataset.
	Data *data.Dataset
	// Baselines is the fitted ladder; the comparison's best baseline is
	// taken from it. Nil leaves the baseline out of the surprisal view.
	Baselines *eval.Ladder
	// Stretch is the block of the surprisal view, from 1; 0 means the
	// median block.
	Stretch int
	// HeldOutTokens caps the held-out tokens the surprisal view scores, as
	// evaluation.heldout_tokens caps the comparison's; 0 means the whole
	// split.
	HeldOutTokens int
	// Held says the caller holds the run directory's lock, so no training
	// process is live whatever report/status.json says.
	Held bool
}

// Build gathers the run directory dir (see Gather) and adds the surprisal
// view and the samples when o has a model and data.
func Build(ctx context.Context, dir string, o Options) (*Data, error) {
	d, err := Gather(dir)
	if err != nil {
		return nil, err
	}
	if o.Held && d.State == StateLive {
		d.State, d.Ended = StateEnded, "the training process stopped without saying how (killed, or the machine went down); the newest checkpoint is intact and the run can be resumed"
	}
	if o.Model == nil || o.Data == nil {
		d.Missing[SectionSurprisal] = "no trained model yet"
		d.Missing[SectionSamples] = "no trained model yet"
		return d, nil
	}
	split := o.Data.Test
	if d.Comparison != nil && d.Comparison.Split == "validation" {
		split = o.Data.Validation
	}
	var base eval.LanguageModel
	baseName := ""
	if d.Comparison != nil && o.Baselines != nil {
		for _, m := range o.Baselines.Models() {
			if m.Name() == d.Comparison.BestBaseline {
				base, baseName = m, m.Name()
			}
		}
	}
	if base == nil {
		d.Missing["surprisal_baseline"] = "no best baseline to set beside the model: run 'weft eval --run " + dir + "', then 'weft report --run " + dir + "'"
	}
	h := runs.HeldOut(split, o.HeldOutTokens)
	s, err := NewSurprisal(ctx, o.Model, base, baseName, split.Name, h.Tokens, h.Chars, o.Stretch)
	if err != nil {
		return nil, err
	}
	d.Surprisal = s
	d.Samples, err = Samples(ctx, o.Model)
	if err != nil {
		return nil, err
	}
	delete(d.Missing, SectionSurprisal)
	delete(d.Missing, SectionSamples)
	return d, nil
}

// Surprisal is the surprisal view: one block of held-out text.
type Surprisal struct {
	Split    string `json:"split"`
	Block    int    `json:"block"`  // from 1
	Blocks   int    `json:"blocks"` // in the split
	Median   int    `json:"median"` // the median block, from 1
	Model    string `json:"model"`
	Baseline string `json:"baseline,omitempty"`
	// BitsPerChar of the block under the model and the baseline.
	BitsPerChar         float64 `json:"bits_per_char"`
	BaselineBitsPerChar Number  `json:"baseline_bits_per_char"`
	Tokens              []Piece `json:"tokens"`
}

// Piece is one token of the surprisal view.
type Piece struct {
	Text         string  `json:"text"`
	Chars        int     `json:"chars"`
	Bits         float64 `json:"bits"`          // under the model
	BaselineBits Number  `json:"baseline_bits"` // NaN without a baseline
	Top          []Guess `json:"top"`
}

// Guess is one of the model's top predictions.
type Guess struct {
	Text string  `json:"text"`
	Prob float64 `json:"prob"`
}

// Blocks cuts a split of per-token character counts chars (nil: one
// character a token) into blocks of at least size characters, a remainder
// shorter than size/2 joining the block before it; it returns the token
// offsets of the block starts and the end.
func Blocks(n int, chars []int, size int) []int {
	bounds := []int{0}
	acc := 0
	for i := 0; i < n; i++ {
		if chars == nil {
			acc++
		} else {
			acc += chars[i]
		}
		if acc >= size && i+1 < n {
			bounds = append(bounds, i+1)
			acc = 0
		}
	}
	if len(bounds) > 1 && acc < size/2 {
		bounds = bounds[:len(bounds)-1]
	}
	return append(bounds, n)
}

// MedianBlock returns the index of the median of the blocks' bits per
// character: the one at position ⌊(n-1)/2⌋ when sorted, the earlier block
// among equals.
func MedianBlock(bpc []float64) int {
	idx := make([]int, len(bpc))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return bpc[idx[a]] < bpc[idx[b]] })
	return idx[(len(idx)-1)/2]
}

// NewSurprisal makes the surprisal view of the held-out split name, its
// tokens toks spanning chars[i] characters each (nil: one): block stretch
// (from 1; 0: the median block) scored by m and, when not nil, by base.
func NewSurprisal(ctx context.Context, m *checkpoint.Model, base eval.LanguageModel, baseName, name string, toks, chars []int, stretch int) (*Surprisal, error) {
	v := m.Vocab
	if len(toks) == 0 {
		return nil, fmt.Errorf("surprisal view: the %s split is empty", name)
	}
	lp := make([]float64, len(toks))
	if err := m.Net.LogProbs(ctx, lp, toks); err != nil {
		return nil, fmt.Errorf("surprisal view: score the %s split: %w", name, err)
	}
	bounds := Blocks(len(toks), chars, BlockChars)
	nb := len(bounds) - 1
	bpc := make([]float64, nb)
	for b := range nb {
		bits, c := 0.0, 0
		for i := bounds[b]; i < bounds[b+1]; i++ {
			bits -= lp[i] / math.Ln2
			c += charsOf(chars, i)
		}
		bpc[b] = bits / float64(max(c, 1))
	}
	med := MedianBlock(bpc)
	blk := med
	if stretch != 0 {
		if stretch < 1 || stretch > nb {
			return nil, fmt.Errorf("--stretch %d: the %s split has %d blocks of about %d characters (1 to %d)", stretch, name, nb, BlockChars, nb)
		}
		blk = stretch - 1
	}
	lo, hi := bounds[blk], bounds[blk+1]
	s := &Surprisal{Split: name, Block: blk + 1, Blocks: nb, Median: med + 1, Model: modelLabel(m),
		BitsPerChar: bpc[blk], BaselineBitsPerChar: Number(math.NaN())}

	var blp []float64
	if base != nil {
		blp = make([]float64, len(toks))
		if err := base.LogProbs(ctx, blp, toks); err != nil {
			return nil, fmt.Errorf("surprisal view: score %s: %w", baseName, err)
		}
		s.Baseline = baseName
		bits, c := 0.0, 0
		for i := lo; i < hi; i++ {
			bits -= blp[i] / math.Ln2
			c += charsOf(chars, i)
		}
		s.BaselineBitsPerChar = Number(bits / float64(max(c, 1)))
	}

	// The top predictions: the model read forward from WarmupTokens
	// before the block.
	st := m.Net.NewStream(1)
	V := m.Vocab.Len()
	dist := make([]float64, V)
	from := max(0, lo-WarmupTokens)
	for i := from; i < lo; i++ {
		if err := st.Feed(toks[i : i+1]); err != nil {
			return nil, err
		}
	}
	prev := -1
	if lo > 0 {
		prev = toks[lo-1]
	}
	for i := lo; i < hi; i++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		st.LogProbs(dist)
		p := Piece{Text: pieceText(v, prev, toks[i]), Chars: charsOf(chars, i), Bits: -lp[i] / math.Ln2,
			BaselineBits: Number(math.NaN()), Top: topGuesses(v, prev, dist, TopK)}
		if blp != nil {
			p.BaselineBits = Number(-blp[i] / math.Ln2)
		}
		s.Tokens = append(s.Tokens, p)
		if err := st.Feed(toks[i : i+1]); err != nil {
			return nil, err
		}
		prev = toks[i]
	}
	return s, nil
}

func charsOf(chars []int, i int) int {
	if chars == nil {
		return 1
	}
	return chars[i]
}

// pieceText is the text a token shows: its own text, the boundary as a
// line break or a document mark.
func pieceText(v *data.Vocab, prev, id int) string {
	if id == v.Boundary() {
		return "\n"
	}
	return v.TokenText(prev, id)
}

// topGuesses returns the k most probable entries of the log-distribution
// dist, most probable first (the lower id among equals).
func topGuesses(v *data.Vocab, prev int, dist []float64, k int) []Guess {
	idx := make([]int, len(dist))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return dist[idx[a]] > dist[idx[b]] })
	out := make([]Guess, 0, k)
	for _, id := range idx[:min(k, len(idx))] {
		out = append(out, Guess{Text: pieceText(v, prev, id), Prob: math.Exp(dist[id])})
	}
	return out
}

func modelLabel(m *checkpoint.Model) string {
	c := m.Config
	return fmt.Sprintf("%s %dx%d", c.Cell, c.Layers, c.HiddenSize)
}

// Samples draws about SampleChars characters from the start of a document
// at each of SampleTemperatures, seeded by SampleSeed: continuation after
// continuation, each one's prompt everything drawn before it and the
// boundary that ended it, until the length is reached.
func Samples(ctx context.Context, m *checkpoint.Model) ([]Sample, error) {
	var out []Sample
	for _, t := range SampleTemperatures {
		var prompt []int
		text := ""
		for round := uint64(0); len([]rune(text)) < SampleChars && round < 64; round++ {
			o := generate.Options{Length: generate.Length{N: SampleChars - len([]rune(text)), Chars: true}, Samples: 1,
				Seed: SampleSeed + round, Sampling: rnn.Sampling{Temperature: t}}
			err := generate.Continue(ctx, m, prompt, o, nil, func(_ int, c generate.Continuation) error {
				text += c.Text
				for _, tk := range c.Tokens {
					prompt = append(prompt, tk.ID)
				}
				if c.Stop == "boundary" {
					text += "\n"
				}
				return nil
			})
			if err != nil {
				return nil, fmt.Errorf("samples: %w", err)
			}
		}
		out = append(out, Sample{Temperature: t, Seed: SampleSeed, Text: text})
	}
	return out, nil
}
