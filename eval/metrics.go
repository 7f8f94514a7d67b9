package eval

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
)

// Result is one row of a comparison: how well one model predicted one
// held-out split. Totals are over the whole split; "bits" are base 2 and
// "nats" natural logarithms. A model that gave some token probability zero
// has infinite cross-entropy, bits and perplexity: the row keeps the
// infinities, so it is never silently dropped. Values not computed, such
// as the interval of a row without a bootstrap, are NaN. JSON writes
// every value that is not finite as null; reading a row with
// ZeroProbTokens above 0 turns a null score (cross-entropy, bits per
// token, perplexity, bits per character) back into +Inf.
type Result struct {
	// Model is the model's label, such as "5-gram kneser_ney".
	Model string `json:"model"`
	// Kind is the model family: "rnn", "ngram", "markov", "hmm",
	// "interpolated", "uniform".
	Kind string `json:"kind"`
	// Split is the held-out split scored: "test" or "validation".
	Split string `json:"split"`
	// Tokens is the number of tokens scored.
	Tokens int `json:"tokens"`
	// Characters is the number of characters of the held-out text.
	Characters int `json:"characters"`
	// CrossEntropyNats is the total cross-entropy of the split in nats,
	// -Σ ln P(token | history), not divided by anything.
	CrossEntropyNats float64 `json:"cross_entropy_nats"`
	// CrossEntropyBits is the same total in bits (nats / ln 2).
	CrossEntropyBits float64 `json:"cross_entropy_bits"`
	// BitsPerToken is CrossEntropyBits / Tokens.
	BitsPerToken float64 `json:"bits_per_token"`
	// Perplexity is the per-token perplexity 2^BitsPerToken, the inverse
	// geometric mean of the token probabilities.
	Perplexity float64 `json:"perplexity"`
	// BitsPerChar is CrossEntropyBits / Characters, comparable across
	// tokenizations of the same text.
	BitsPerChar float64 `json:"bits_per_char"`
	// CILow and CIHigh bound the bootstrap confidence interval of
	// BitsPerChar (NaN when no bootstrap ran).
	CILow  float64 `json:"ci_low"`
	CIHigh float64 `json:"ci_high"`
	// Reference names the model the differences are taken from, usually
	// the best baseline; empty when none.
	Reference string `json:"reference,omitempty"`
	// DiffBitsPerChar is BitsPerChar minus the reference's (negative is
	// better), with its paired bootstrap interval DiffCILow..DiffCIHigh.
	DiffBitsPerChar float64 `json:"diff_bits_per_char"`
	DiffCILow       float64 `json:"diff_ci_low"`
	DiffCIHigh      float64 `json:"diff_ci_high"`
	// ZeroProbTokens counts the tokens given probability zero.
	ZeroProbTokens int `json:"zero_prob_tokens"`
	// UnknownTokens counts the scored tokens that are the unknown symbol,
	// and UnknownRate is UnknownTokens / Tokens.
	UnknownTokens int     `json:"unknown_tokens"`
	UnknownRate   float64 `json:"unknown_rate"`
	// Comparable is false when BitsPerChar does not measure the whole text,
	// with the reason in NotComparable.
	Comparable    bool   `json:"comparable"`
	NotComparable string `json:"not_comparable,omitempty"`
	// StateBits is the memory a hidden Markov model's state can hold,
	// log2 N bits for N states; zero for other models.
	StateBits float64 `json:"state_bits,omitempty"`
	// TrainingNote says how much of the training split the model was
	// fitted on when it was not all of it, as TrainingNoter gives it
	// ("counts from 200 M of 900 M training tokens"); empty otherwise.
	TrainingNote string `json:"training_note,omitempty"`
}

// SetTrainingNote sets r.TrainingNote from the model m of the row, when
// m is a TrainingNoter.
func (r *Result) SetTrainingNote(m LanguageModel) {
	if n, ok := m.(TrainingNoter); ok {
		r.TrainingNote = n.TrainingNote()
	}
}

// NewResult summarises the per-token natural-log probabilities logp of a
// held-out text of the given number of characters:
//
//	cross_entropy_nats = -Σ_i logp[i]
//	cross_entropy_bits = cross_entropy_nats / ln 2
//	bits_per_token     = cross_entropy_bits / len(logp)
//	perplexity         = 2^bits_per_token
//	bits_per_char      = cross_entropy_bits / characters
//
// The interval and difference fields are NaN until Bootstrap results are
// set; the row is Comparable until SetUnknown says otherwise.
func NewResult(model, kind, split string, logp []float64, characters int) Result {
	var t Tally
	for _, lp := range logp {
		t.Add(lp)
	}
	return t.Result(model, kind, split, characters)
}

// A Tally sums natural-log probabilities one at a time, in the order they
// come, as NewResult sums a slice of them: a scorer that streams a held-out
// split through a Tally gets NewResult's numbers without holding them.
type Tally struct {
	nats   float64
	tokens int
	zeros  int
}

// Add counts one token's natural-log probability.
func (t *Tally) Add(lp float64) {
	if math.IsInf(lp, -1) {
		t.zeros++
	}
	t.nats -= lp
	t.tokens++
}

// Result is NewResult over the tokens added so far.
func (t *Tally) Result(model, kind, split string, characters int) Result {
	nats := t.nats
	bits := nats / math.Ln2
	nan := math.NaN()
	r := Result{
		Model: model, Kind: kind, Split: split,
		Tokens: t.tokens, Characters: characters,
		CrossEntropyNats: nats, CrossEntropyBits: bits,
		BitsPerToken: bits / float64(t.tokens),
		BitsPerChar:  bits / float64(characters),
		CILow:        nan, CIHigh: nan,
		DiffBitsPerChar: nan, DiffCILow: nan, DiffCIHigh: nan,
		ZeroProbTokens: t.zeros,
		Comparable:     true,
	}
	r.Perplexity = math.Exp(nats / float64(t.tokens))
	return r
}

// SetUnknown counts the tokens of seq (the scored sequence) equal to the
// unknown symbol unk (a negative unk means there is none). When
// coversMany is true, the unknown symbol stands for many different strings:
// its probability is then not the probability of the text it replaced, so
// a row with any unknown tokens is marked not comparable on bits per
// character, with the reason. The unknown entry of every tokenizer of
// package data stands for every piece without an entry of its own, so
// comparisons pass true whatever the tokenizer.
func (r *Result) SetUnknown(seq []int, unk int, coversMany bool) {
	n := 0
	if unk >= 0 {
		for _, w := range seq {
			if w == unk {
				n++
			}
		}
	}
	r.UnknownTokens = n
	r.UnknownRate = 0
	if len(seq) > 0 {
		r.UnknownRate = float64(n) / float64(len(seq))
	}
	if coversMany && n > 0 {
		r.SetNotComparable(fmt.Sprintf("%d tokens (%.2f%%) are the unknown symbol, which stands for every piece without an entry of its own; its probability is not spread over what it stands for, so bits per character undercounts them",
			n, 100*r.UnknownRate))
	}
}

// SetNotComparable marks the row not comparable on bits per character
// and adds the reason to NotComparable, after any reason already there.
func (r *Result) SetNotComparable(reason string) {
	r.Comparable = false
	if r.NotComparable != "" {
		r.NotComparable += "; "
	}
	r.NotComparable += reason
}

// SetIntervals stores a model's interval and its difference from the
// reference model, as returned by Bootstrap.
func (r *Result) SetIntervals(reference string, own Interval, diff Interval) {
	r.CILow, r.CIHigh = own.Low, own.High
	r.Reference = reference
	r.DiffBitsPerChar, r.DiffCILow, r.DiffCIHigh = diff.Estimate, diff.Low, diff.High
}

// jsonFloat writes finite values as numbers and every other value (NaN,
// ±Inf) as null, since JSON has no such numbers. It reads null as NaN,
// and the strings "+Inf" and "-Inf" that version 1 of the eval report
// wrote as infinities.
type jsonFloat float64

func (f jsonFloat) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

func (f *jsonFloat) UnmarshalJSON(b []byte) error {
	switch string(b) {
	case "null":
		*f = jsonFloat(math.NaN())
		return nil
	case `"+Inf"`, `"Inf"`:
		*f = jsonFloat(math.Inf(1))
		return nil
	case `"-Inf"`:
		*f = jsonFloat(math.Inf(-1))
		return nil
	}
	v, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		return fmt.Errorf("eval: bad number %s in result", b)
	}
	*f = jsonFloat(v)
	return nil
}

type resultJSON struct {
	Model            string    `json:"model"`
	Kind             string    `json:"kind"`
	Split            string    `json:"split"`
	Tokens           int       `json:"tokens"`
	Characters       int       `json:"characters"`
	CrossEntropyNats jsonFloat `json:"cross_entropy_nats"`
	CrossEntropyBits jsonFloat `json:"cross_entropy_bits"`
	BitsPerToken     jsonFloat `json:"bits_per_token"`
	Perplexity       jsonFloat `json:"perplexity"`
	BitsPerChar      jsonFloat `json:"bits_per_char"`
	CILow            jsonFloat `json:"ci_low"`
	CIHigh           jsonFloat `json:"ci_high"`
	Reference        string    `json:"reference,omitempty"`
	DiffBitsPerChar  jsonFloat `json:"diff_bits_per_char"`
	DiffCILow        jsonFloat `json:"diff_ci_low"`
	DiffCIHigh       jsonFloat `json:"diff_ci_high"`
	ZeroProbTokens   int       `json:"zero_prob_tokens"`
	UnknownTokens    int       `json:"unknown_tokens"`
	UnknownRate      jsonFloat `json:"unknown_rate"`
	Comparable       bool      `json:"comparable"`
	NotComparable    string    `json:"not_comparable,omitempty"`
	StateBits        jsonFloat `json:"state_bits,omitempty"`
	TrainingNote     string    `json:"training_note,omitempty"`
}

// MarshalJSON writes the row with the keys of the field tags, values that
// are not finite as null.
func (r Result) MarshalJSON() ([]byte, error) {
	return json.Marshal(resultJSON{
		r.Model, r.Kind, r.Split, r.Tokens, r.Characters,
		jsonFloat(r.CrossEntropyNats), jsonFloat(r.CrossEntropyBits), jsonFloat(r.BitsPerToken),
		jsonFloat(r.Perplexity), jsonFloat(r.BitsPerChar), jsonFloat(r.CILow), jsonFloat(r.CIHigh),
		r.Reference, jsonFloat(r.DiffBitsPerChar), jsonFloat(r.DiffCILow), jsonFloat(r.DiffCIHigh),
		r.ZeroProbTokens, r.UnknownTokens, jsonFloat(r.UnknownRate), r.Comparable, r.NotComparable,
		jsonFloat(r.StateBits), r.TrainingNote,
	})
}

// UnmarshalJSON reads what MarshalJSON writes (null scores of a row with
// tokens of probability zero become +Inf), and the "+Inf" strings of
// version 1 of the eval report.
func (r *Result) UnmarshalJSON(b []byte) error {
	var j resultJSON
	if err := json.Unmarshal(b, &j); err != nil {
		return err
	}
	*r = Result{
		j.Model, j.Kind, j.Split, j.Tokens, j.Characters,
		float64(j.CrossEntropyNats), float64(j.CrossEntropyBits), float64(j.BitsPerToken),
		float64(j.Perplexity), float64(j.BitsPerChar), float64(j.CILow), float64(j.CIHigh),
		j.Reference, float64(j.DiffBitsPerChar), float64(j.DiffCILow), float64(j.DiffCIHigh),
		j.ZeroProbTokens, j.UnknownTokens, float64(j.UnknownRate), j.Comparable, j.NotComparable,
		float64(j.StateBits), j.TrainingNote,
	}
	if r.ZeroProbTokens > 0 {
		for _, f := range []*float64{&r.CrossEntropyNats, &r.CrossEntropyBits, &r.BitsPerToken, &r.Perplexity, &r.BitsPerChar} {
			if math.IsNaN(*f) {
				*f = math.Inf(1)
			}
		}
	}
	return nil
}

// Breakdown is the score of a subset of the held-out tokens.
type Breakdown struct {
	// Label names the subset, such as "marked" or "seen 10-99".
	Label string `json:"label"`
	// Tokens and Characters are the subset's tokens and the characters
	// they span.
	Tokens     int `json:"tokens"`
	Characters int `json:"characters"`
	// Bits is the subset's total cross-entropy in bits.
	Bits float64 `json:"bits"`
	// BitsPerChar is Bits / Characters (NaN for an empty subset).
	BitsPerChar float64 `json:"bits_per_char"`
}

func (b *Breakdown) add(lp float64, chars int) {
	b.Tokens++
	b.Characters += chars
	b.Bits -= lp / math.Ln2
}

func (b *Breakdown) finish() {
	b.BitsPerChar = b.Bits / float64(b.Characters)
	if b.Characters == 0 {
		b.BitsPerChar = math.NaN()
	}
}

// charsAt is the number of characters token i spans: chars[i], or 1 when
// chars is nil (a character model).
func charsAt(chars []int, i int) int {
	if chars == nil {
		return 1
	}
	return chars[i]
}

// Marked splits the held-out tokens by a per-token mask (marked[i] true
// for the positions of interest, such as the long-range-predictable
// positions of the demo corpus) and returns the score of the marked tokens
// and of all others. chars[i] is the number of characters token i spans
// (nil: one each). Use MarkIndices to turn a list of positions into a
// mask.
func Marked(logp []float64, chars []int, marked []bool) (in, out Breakdown) {
	if len(marked) != len(logp) || (chars != nil && len(chars) != len(logp)) {
		panic("eval: Marked: lengths of logp, chars and marked differ")
	}
	in.Label, out.Label = "marked", "unmarked"
	for i, lp := range logp {
		if marked[i] {
			in.add(lp, charsAt(chars, i))
		} else {
			out.add(lp, charsAt(chars, i))
		}
	}
	in.finish()
	out.finish()
	return in, out
}

// MarkIndices returns the mask of n tokens with the given positions set;
// positions outside 0..n-1 are an error.
func MarkIndices(n int, positions []int) ([]bool, error) {
	m := make([]bool, n)
	for _, p := range positions {
		if p < 0 || p >= n {
			return nil, fmt.Errorf("marked position %d outside 0..%d", p, n-1)
		}
		m[p] = true
	}
	return m, nil
}

// TokenCounts returns how often each token id 0..vocab-1 occurs in train;
// ids outside the range are ignored.
func TokenCounts(train []int, vocab int) []int { return TokenCountsOf(IntTokens(train), vocab) }

// FrequencyBands groups the held-out tokens seq by how often each was seen
// in training (trainCounts, from TokenCounts) into decades: "unseen" (0),
// "seen 1", "seen 2-9", "seen 10-99", "seen 100-999", "seen 1000-9999",
// and so on, and returns the score of each non-empty band, rarest first.
// chars[i] is the number of characters token i spans (nil: one each).
func FrequencyBands(logp []float64, seq []int, chars []int, trainCounts []int) []Breakdown {
	if len(seq) != len(logp) || (chars != nil && len(chars) != len(logp)) {
		panic("eval: FrequencyBands: lengths of logp, seq and chars differ")
	}
	var bands []Breakdown
	for i, w := range seq {
		n := 0
		if w >= 0 && w < len(trainCounts) {
			n = trainCounts[w]
		}
		b := band(n)
		for len(bands) <= b {
			bands = append(bands, Breakdown{Label: bandLabel(len(bands))})
		}
		bands[b].add(logp[i], charsAt(chars, i))
	}
	out := bands[:0]
	for _, b := range bands {
		if b.Tokens > 0 {
			b.finish()
			out = append(out, b)
		}
	}
	return out
}

// band is 0 for count 0, 1 for count 1, then 2+k for counts of k+1
// decimal digits from 2 up (2-9 is band 2, 10-99 band 3, ...).
func band(n int) int {
	switch {
	case n <= 0:
		return 0
	case n == 1:
		return 1
	}
	b := 2
	for lim := 10; n >= lim && b < 20; lim *= 10 {
		b++
	}
	return b
}

func bandLabel(b int) string {
	switch b {
	case 0:
		return "unseen"
	case 1:
		return "seen 1"
	case 2:
		return "seen 2-9"
	}
	lo := 1
	for range b - 2 {
		lo *= 10
	}
	return fmt.Sprintf("seen %d-%d", lo, lo*10-1)
}
