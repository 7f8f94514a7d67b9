package eval

import (
	"context"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
)

// HeldOut is a held-out split as a comparison scores it: its token ids and
// the characters of text each token stands for. Bits per character of
// every row, its interval, its difference from the best baseline and its
// breakdowns all divide by the sum of Chars, so one count of characters
// serves them all.
type HeldOut struct {
	// Tokens are the split's token ids, in text order: the whole split, or
	// its first tokens (see Of).
	Tokens []int
	// Of is the number of tokens of the whole split when Tokens holds
	// only its first ones (evaluation.heldout_tokens), 0 when Tokens is
	// the whole split.
	Of int
	// Chars[i] is the number of characters token i stands for; nil means
	// one each (a character model).
	Chars []int
}

// Characters is the sum of h.Chars, the denominator of bits per character.
func (h HeldOut) Characters() int {
	if h.Chars == nil {
		return len(h.Tokens)
	}
	n := 0
	for _, c := range h.Chars {
		n += c
	}
	return n
}

// Entrant is one model of a comparison.
type Entrant struct {
	// Model scores the tokens.
	Model LanguageModel
	// Label names the row; empty means Model.Name().
	Label string
	// Kind is the row's kind ("rnn", "ngram", "markov", "hmm", ...);
	// empty means the model's Kind, or "unknown".
	Kind string
}

func (e Entrant) label() string {
	if e.Label != "" {
		return e.Label
	}
	return e.Model.Name()
}

func (e Entrant) kind() string {
	if e.Kind != "" {
		return e.Kind
	}
	if k, ok := e.Model.(Kinder); ok {
		return k.Kind()
	}
	return "unknown"
}

// scoredNote says which held-out splits were scored on their first tokens
// only.
func scoredNote(in CompareInput) string {
	var parts []string
	part := func(h HeldOut, name string) {
		if h.Of > len(h.Tokens) {
			parts = append(parts, fmt.Sprintf("the first %s of %s %s tokens", Thousands(int64(len(h.Tokens))), Thousands(int64(h.Of)), name))
		}
	}
	if in.Split == "validation" {
		part(in.Reported, "validation")
	} else {
		part(in.Reported, in.Split)
		part(in.Validation, "validation")
	}
	if len(parts) == 0 {
		return ""
	}
	return "scored on " + strings.Join(parts, " and ") + " (evaluation.heldout_tokens)"
}

// Thousands writes n with commas between groups of three digits, as every
// table of weft writes counts.
func Thousands(n int64) string {
	s := strconv.FormatInt(n, 10)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + "," + s[i:]
	}
	if neg {
		s = "-" + s
	}
	return s
}

func isBaselineKind(kind string) bool {
	return kind == "ngram" || kind == "markov" || kind == "hmm"
}

// CompareInput is what Compare compares: the models, the two held-out
// splits and the facts about the vocabulary that decide whether a row's
// bits per character measure the whole text.
type CompareInput struct {
	// Split names the reported split, "test" or "validation".
	Split string
	// Validation is the split the best baseline and the interpolation
	// weight are chosen on; Reported is the split the rows report. With
	// Split "validation" they are the same split.
	Validation, Reported HeldOut
	// Models lists the models compared: the recurrent model (kind "rnn")
	// and the baselines.
	Models []Entrant
	// Unknown is the token id of the unknown entry, or -1 for none.
	Unknown int
	// Lowercased says the text was lower-cased before tokenizing: the
	// models then predict the folded text, not the text itself.
	Lowercased bool
	// CharacterUnit says what a character of HeldOut.Chars is, for the
	// table's header, such as "a character of a symbol or a line end (the
	// whitespace between symbols is not counted)"; empty means a
	// character of the text.
	CharacterUnit string
	// TrainCounts, from TokenCounts over the training split, gives the
	// frequency bands of the breakdown; nil means none.
	TrainCounts []int
	// Marks flags the positions of Reported to break down separately
	// (the demo corpus's long-range positions); nil means none.
	Marks []bool
	// Progress, if not nil, hears about the scoring.
	Progress ProgressFunc
}

// ModelBreakdown is the breakdown of one model's score into subsets of
// the held-out tokens.
type ModelBreakdown struct {
	Model string      `json:"model"`
	Parts []Breakdown `json:"parts"`
}

// Comparison is the outcome of comparing models on one held-out split.
type Comparison struct {
	// Split is the reported split.
	Split string
	// CharacterUnit says what a character is, as CompareInput gives it.
	CharacterUnit string
	// ConfidenceLevel is the coverage of the intervals, from the config.
	ConfidenceLevel float64
	// BlockChars is the bootstrap's block length in characters, 0 when
	// there are no intervals; IntervalNote says why there are none, or
	// that the blocks were shrunk (PlanBlocks).
	BlockChars   int
	IntervalNote string
	// ScoredNote says that the held-out splits were scored on their first
	// tokens only (HeldOut.Of), and how many; empty when whole splits
	// were scored.
	ScoredNote string
	// TunedOnReported is true when the reported split is the validation
	// split: the best baseline and the interpolation weight were then
	// chosen on the split reported, so the difference column and the
	// interpolated row are optimistic.
	TunedOnReported bool
	// Rows are the rows, best first (lowest bits per character, NaN
	// last).
	Rows []Result
	// BestBaseline is the best baseline chosen on the validation split,
	// empty when there is none, and BestBaselineValBPC its validation
	// bits per character (NaN when none).
	BestBaseline       string
	BestBaselineValBPC float64
	// InterpolationPartner is the best n-gram baseline on the validation
	// split, which the interpolated row mixes with the recurrent model,
	// and Lambda the recurrent model's weight in it, tuned on the
	// validation split (empty and NaN when there is no such row).
	InterpolationPartner string
	Lambda               float64
	// Bands breaks the recurrent model, the interpolation and the best
	// baseline down by how often each token was seen in training;
	// LongRange by the marked positions against the others.
	Bands     []ModelBreakdown
	LongRange []ModelBreakdown
}

// Compare scores every model on the validation split and on the reported
// split and chooses on validation alone (the reported split stays
// untouched by the choices): the best baseline (BestBaseline over the
// validation rows, n-gram, Markov chain or HMM), the reference of the
// difference column; and the best n-gram baseline, the partner of the
// recurrent model (the first model of kind "rnn") in the interpolated
// row, whose weight TuneMixture fits to the validation split (with
// cfg.Interpolate). It then sets bootstrap intervals on the reported
// split (cfg's bootstrap settings) for every row and for its difference
// from the best baseline.
func Compare(ctx context.Context, cfg Config, in CompareInput) (*Comparison, error) {
	val, rep := in.Validation, in.Reported
	if len(rep.Tokens) == 0 {
		return nil, fmt.Errorf("the %s split is empty: raise data.%s_fraction", in.Split, in.Split)
	}
	type cand struct {
		name, kind string
		stateBits  float64
		note       string
		val, rep   []float64
	}
	cands := make([]*cand, len(in.Models))
	stage := "score models on validation and " + in.Split
	for i, e := range in.Models {
		in.Progress.report(stage, i, len(in.Models))
		c := &cand{name: e.label(), kind: e.kind()}
		if s, ok := e.Model.(StateBitser); ok {
			c.stateBits = s.StateBits()
		}
		if n, ok := e.Model.(TrainingNoter); ok {
			c.note = n.TrainingNote()
		}
		c.val = make([]float64, len(val.Tokens))
		if err := e.Model.LogProbs(ctx, c.val, val.Tokens); err != nil {
			return nil, fmt.Errorf("score %s on validation: %w", c.name, err)
		}
		if in.Split == "validation" {
			c.rep = c.val
		} else {
			c.rep = make([]float64, len(rep.Tokens))
			if err := e.Model.LogProbs(ctx, c.rep, rep.Tokens); err != nil {
				return nil, fmt.Errorf("score %s on %s: %w", c.name, in.Split, err)
			}
		}
		cands[i] = c
	}
	in.Progress.report(stage, len(in.Models), len(in.Models))
	cmp := &Comparison{TunedOnReported: in.Split == "validation", Split: in.Split, CharacterUnit: in.CharacterUnit, ConfidenceLevel: cfg.ConfidenceLevel, Lambda: math.NaN(), BestBaselineValBPC: math.NaN(),
		ScoredNote: scoredNote(in)}

	// The best baseline and the interpolation partner are chosen on
	// validation rows (eval.BestBaseline), so the reported split stays
	// untouched by the choice.
	valChars := val.Characters()
	valRows := make([]Result, len(cands))
	for i, c := range cands {
		valRows[i] = NewResult(c.name, c.kind, "validation", c.val, valChars)
		in.setComparable(&valRows[i], val.Tokens)
	}
	best, err := BestBaseline(valRows)
	if err != nil {
		best = -1
	} else {
		cmp.BestBaseline = cands[best].name
		cmp.BestBaselineValBPC = valRows[best].BitsPerChar
	}
	partner := bestOf(valRows, "ngram")
	rnnIdx := -1
	for i, c := range cands {
		if c.kind == "rnn" {
			rnnIdx = i
			break
		}
	}
	if cfg.Interpolate && rnnIdx >= 0 && partner >= 0 {
		lambda, err := TuneMixture(cands[rnnIdx].val, cands[partner].val)
		if err != nil {
			return nil, err
		}
		mix := make([]float64, len(rep.Tokens))
		MixLogProbs(mix, cands[rnnIdx].rep, cands[partner].rep, lambda)
		cmp.Lambda = lambda
		cmp.InterpolationPartner = cands[partner].name
		cands = append(cands, &cand{
			name: fmt.Sprintf("%s + %s (λ=%.2f)", cands[rnnIdx].name, cands[partner].name, lambda),
			kind: "interpolated",
			rep:  mix,
		})
	}

	// One denominator for every figure: the estimate, its interval, the
	// difference from the best baseline and the breakdowns all divide by
	// the sum of the reported split's Chars.
	repChars := rep.Characters()
	results := make([]Result, len(cands))
	series := make([]Series, len(cands))
	for i, c := range cands {
		r := NewResult(c.name, c.kind, in.Split, c.rep, repChars)
		in.setComparable(&r, rep.Tokens)
		r.StateBits = c.stateBits
		r.TrainingNote = c.note
		results[i] = r
		series[i] = Series{LogProbs: c.rep, Chars: rep.Chars}
	}
	switch {
	case len(cands) == 0:
	case cfg.BootstrapSamples == 0:
		cmp.IntervalNote = "no intervals: evaluation.bootstrap_samples is 0"
	default:
		bc := cfg.Bootstrap()
		bc.BlockChars, cmp.IntervalNote = PlanBlocks(repChars, cfg.BootstrapBlockChars)
		cmp.BlockChars = bc.BlockChars
		if bc.BlockChars == 0 {
			break
		}
		bpc, diff, err := Bootstrap(series, max(best, 0), bc)
		if err != nil {
			return nil, err
		}
		for i := range results {
			results[i].CILow, results[i].CIHigh = bpc[i].Low, bpc[i].High
			if best >= 0 {
				results[i].SetIntervals(cands[best].name, bpc[i], diff[i])
			}
		}
	}

	// Breakdowns for the models a reader compares: the recurrent one, the
	// interpolation and the best baseline.
	for i, c := range cands {
		if c.kind != "rnn" && c.kind != "interpolated" && i != best {
			continue
		}
		if in.TrainCounts != nil {
			cmp.Bands = append(cmp.Bands, ModelBreakdown{c.name, FrequencyBands(c.rep, rep.Tokens, rep.Chars, in.TrainCounts)})
		}
		if in.Marks != nil {
			inside, outside := Marked(c.rep, rep.Chars, in.Marks)
			inside.Label, outside.Label = "long-range positions", "all other positions"
			cmp.LongRange = append(cmp.LongRange, ModelBreakdown{c.name, []Breakdown{inside, outside}})
		}
	}
	SortBestFirst(results)
	cmp.Rows = results
	return cmp, nil
}

// setComparable marks r not comparable on bits per character when its
// bits do not measure the text of its characters: when some tokens of seq
// are the unknown entry, whose probability stands for many strings at
// once, whatever the tokenizer (min_count and max_vocabulary apply to all),
// and when the text was lower-cased.
func (in *CompareInput) setComparable(r *Result, seq []int) {
	r.SetUnknown(seq, in.Unknown, true)
	if in.Lowercased {
		r.SetNotComparable("lower-cased: the model predicts the text with its letters folded to lower case, not the text itself")
	}
}

// SortBestFirst orders rows by bits per character, best first, NaN last,
// keeping the given order among equals.
func SortBestFirst(rows []Result) {
	sort.SliceStable(rows, func(i, j int) bool { return lessBPC(rows[i].BitsPerChar, rows[j].BitsPerChar) })
}

// lessBPC orders scores best first, NaN last.
func lessBPC(a, b float64) bool {
	if math.IsNaN(b) {
		return !math.IsNaN(a)
	}
	return a < b
}

// totalBits is -Σ logp / ln 2.
func totalBits(logp []float64) float64 {
	var s float64
	for _, lp := range logp {
		s -= lp
	}
	return s / math.Ln2
}

// Family names the family of a row for FamilyBest: its kind, and for an
// n-gram row its smoothing method too ("ngram kneser_ney"), so that each
// smoother keeps its best order.
func Family(r Result) string {
	if r.Kind == "ngram" {
		if spec, err := ParseBaselineLabel(r.Model); err == nil {
			return r.Kind + " " + spec.Method.String()
		}
	}
	return r.Kind
}

// FamilyBest keeps, of rows sorted best first, the first row of each
// Family, and every row named in keep (the best baseline, say), in their
// order: the short table a reader starts with.
func FamilyBest(rows []Result, keep ...string) []Result {
	seen := map[string]bool{}
	var out []Result
	for _, r := range rows {
		f := Family(r)
		if seen[f] && !slices.Contains(keep, r.Model) {
			continue
		}
		seen[f] = true
		out = append(out, r)
	}
	return out
}
