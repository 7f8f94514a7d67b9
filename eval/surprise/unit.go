package surprise

import (
	"context"
	"math"
	"unicode/utf8"

	"weft/data"
	"weft/eval"
)

// unit is a unit being assembled from its scored pieces.
type unit struct {
	row   Row
	nats  float64
	worst float64 // surprise of the most surprising token so far, in nats
	text  []byte
	runes int
	prev  int
}

// begin starts a unit at line of source.
func (u *unit) begin(source string, line int) {
	u.row = Row{Source: source, Line: line}
	u.nats, u.worst = 0, math.Inf(-1)
	u.text, u.runes, u.prev = u.text[:0], 0, -1
}

// add adds one scored piece (its tokens, their characters, nchars in all,
// and their log-probabilities), totalled by eval.NewResult as weft eval
// totals a split; the text keeps every token but skipText when keepText
// is set.
func (u *unit) add(name, kind string, v *data.Vocab, keepText bool, skipText int, tokens, chars []int, nchars int, logp []float64) {
	if len(tokens) == 0 {
		return
	}
	res := eval.NewResult(name, kind, "", logp, nchars)
	res.SetUnknown(tokens, v.Unknown(), true)
	offset := u.row.Characters
	for i, lp := range logp {
		id := tokens[i]
		if -lp > u.worst {
			u.worst = -lp
			u.row.SurpriseBits = -lp / math.Ln2
			u.row.SurpriseOffset = offset
			u.row.SurpriseToken = v.Decode(tokens[i : i+1])
			if id == v.Boundary() || id == v.Unknown() {
				u.row.SurpriseToken = v.Piece(id)
			}
		}
		offset += chars[i]
		if keepText && u.runes <= TextLimit && id != skipText {
			t := v.TokenText(u.prev, id)
			u.text = append(u.text, t...)
			u.runes += utf8.RuneCountInString(t)
			u.prev = id
		}
	}
	u.nats += res.CrossEntropyNats
	u.row.Characters += nchars
	u.row.Tokens += res.Tokens
	u.row.UnknownTokens += res.UnknownTokens
	u.row.Pieces++
}

// finish returns the unit's row.
func (u *unit) finish(keepText bool) Row {
	r := u.row
	r.Bits = u.nats / math.Ln2
	r.BitsPerChar = r.Bits / float64(r.Characters)
	if keepText {
		r.Text = lineText(string(u.text))
	}
	return r
}

// lineText cuts a unit's text at TextLimit characters, ending it with "…".
func lineText(t string) string {
	if utf8.RuneCountInString(t) > TextLimit {
		return string(append([]rune(t)[:TextLimit], '…'))
	}
	return t
}

// LineRow returns the row of one line scored in one piece, as a Scorer
// with unit Line gives it: tokens are the line's tokens with its line end
// (the vocabulary's "\n"), chars their lengths in characters and logp
// their log-probabilities (nats) under the model named name of kind kind.
// A caller that scores lines its own way (with a carried state, say) gets
// rows with the same fields and the same arithmetic. text is the line as
// read, without its line end: the row's text (cut at TextLimit).
func LineRow(name, kind string, v *data.Vocab, tokens, chars []int, logp []float64, text, source string, line int) Row {
	skip := -1
	if id, ok := v.ID("\n"); ok {
		skip = id
	}
	n := 0
	for _, c := range chars {
		n += c
	}
	var u unit
	u.begin(source, line)
	u.add(name, kind, v, true, skip, tokens, chars, n, logp)
	r := u.finish(false)
	r.Text = lineText(text)
	return r
}

// BatchModel is a language model that also scores many sequences at once
// (rnn.Model does, as the parallel streams of one forward pass).
// LogProbsBatch must write to dst[i] exactly what LogProbs writes for
// seqs[i] alone. A Scorer given a BatchModel hands it its pieces
// BatchPieces at a time.
type BatchModel interface {
	eval.LanguageModel
	LogProbsBatch(ctx context.Context, dst [][]float64, seqs [][]int) error
}

// BatchPieces is the most pieces a Scorer scores together with a
// BatchModel, and BatchTokens the most tokens (contexts included) past
// which it hands the pieces over sooner: enough pieces to keep the
// model's batch rows (rnn.BatchStreams) full as lines of different
// lengths end, and a bound on the memory of long pieces. The rows of a
// batch are emitted once the whole batch is scored (or at Flush).
const (
	BatchPieces = 256
	BatchTokens = 1 << 18
)

// computeBatch scores the pieces ps (all with the same context) as one
// batch: each from the start of a document, or after its context tokens.
func (s *Scorer) computeBatch(ps []*piece) {
	seqs := make([][]int, len(ps))
	dst := make([][]float64, len(ps))
	for i, p := range ps {
		seqs[i] = p.tokens
		if len(p.warm) > 0 {
			seqs[i] = append(append(make([]int, 0, len(p.warm)+len(p.tokens)), p.warm...), p.tokens...)
		}
		dst[i] = make([]float64, len(seqs[i]))
	}
	err := s.batch.LogProbsBatch(ps[0].ctx, dst, seqs)
	for i, p := range ps {
		p.err = err
		p.logp = append(p.logp[:0], dst[i][len(p.warm):]...)
	}
}
