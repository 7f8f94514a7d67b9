// Package surprise scores text by how surprising a language model finds
// it, unit by unit: each line, each document, or each window of a fixed
// number of tokens. For each unit it gives the total surprise in bits
// (−log₂ of the probability the model gives the text), bits per character,
// the most surprising token with its surprise and character offset, and the
// count of tokens that are the unknown symbol. It is the engine of
// 'weft score', for any eval.LanguageModel: a recurrent model or a fitted
// baseline.
//
// A unit is scored in pieces of at most Options.MaxChars characters, each
// from the start of a document (a fresh model state) unless Options.Context
// warms the model up on the tokens of the same input just before it. Up to
// Options.Workers pieces are scored at once; the rows, and every number in
// them, are the same for any number of workers. A model that scores many
// sequences at once (a BatchModel, such as rnn.Model) gets BatchPieces
// pieces per call, each worker scoring one such batch at a time, with the
// same numbers as one piece at a time; the rows of a batch are then
// emitted when the whole batch is scored.
package surprise

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"slices"
	"unicode/utf8"

	"weft/data"
	"weft/eval"
)

// Units.
const (
	Line     = "line"     // a line with its line end (which counts as one character)
	Document = "document" // a whole input, followed by the document boundary when the vocabulary has one
	Window   = "window"   // Options.Window consecutive tokens, across line ends
)

// TextLimit is the most characters of a unit's text a Row keeps; a longer
// text is cut and ends with "…".
const TextLimit = 256

// Options say how text is cut into units and scored.
type Options struct {
	// Unit is Line, Document or Window.
	Unit string
	// Window is the tokens per window, with Unit Window.
	Window int
	// MaxChars is the longest stretch of a unit scored in one piece, in
	// characters; a longer unit is scored in consecutive pieces.
	MaxChars int
	// Context is the number of tokens of the preceding text of the same
	// input each piece is warmed up on (not scored); 0 scores each piece
	// from a fresh state.
	Context int
	// Workers is the number of pieces scored at once; the model must be
	// safe for concurrent LogProbs calls (rnn.Model is). 0 or 1: one.
	Workers int
}

// Row is one scored unit.
type Row struct {
	Source         string  `json:"source"`
	Line           int     `json:"line"` // where the unit starts, from 1
	Characters     int     `json:"characters"`
	Tokens         int     `json:"tokens"`
	Bits           float64 `json:"bits"`
	BitsPerChar    float64 `json:"bits_per_char"`
	SurpriseBits   float64 `json:"surprise_bits"`
	SurpriseOffset int     `json:"surprise_offset"` // in characters from the unit's start
	SurpriseToken  string  `json:"surprise_token"`
	UnknownTokens  int     `json:"unknown_tokens"`
	Pieces         int     `json:"pieces"`
	Text           string  `json:"text"` // empty for Document units

	// Seq is the order in which the row was scored, from 0.
	Seq int `json:"-"`
}

// Scorer scores inputs unit by unit and hands each finished row to its
// emit function, in input order. It is not safe for concurrent use.
type Scorer struct {
	lm       eval.LanguageModel
	kind     string
	vocab    *data.Vocab
	o        Options
	newline  int // the line-end token, -1 when the vocabulary has none
	skipText int // token id left out of the text: the line end of a line unit
	emit     func(Row) error
	seq      int

	recent []int // the last Context tokens of the current input, oldest first

	// The text of line units as read (normalized, not rebuilt from tokens,
	// so that characters outside the vocabulary print as themselves): the
	// lines read but not yet scored, and the one being read, each kept to
	// TextLimit+1 characters.
	lines    []string
	lineBuf  []byte
	lineRune int

	cur   *piece   // the piece being filled
	queue []*piece // pieces handed to workers, oldest first
	free  []*piece
	sem   chan struct{}

	// The unit being assembled.
	acc unit

	batch   BatchModel // lm when it scores many sequences at once, else nil
	pending []*piece   // pieces waiting for a full batch
	// tokens of the pending pieces, their contexts included
	pendingTokens int
}

// piece is one piece of a unit: its tokens, their characters and, once
// scored, their log-probabilities.
type piece struct {
	ctx           context.Context
	warm          []int // context tokens scored before the piece, not counted
	tokens, chars []int
	nchars        int
	logp          []float64
	err           error
	done          chan struct{}

	first, last bool // the piece starts or ends its unit
	source      string
	line        int
	text        string // of a line unit's last piece: the line as it was read
}

// New returns a scorer of text encoded with v, scored by lm (whose kind,
// such as "rnn" or "ngram", labels its results), that hands every row to
// emit.
func New(lm eval.LanguageModel, kind string, v *data.Vocab, o Options, emit func(Row) error) (*Scorer, error) {
	switch o.Unit {
	case Line, Document:
		if o.Window != 0 {
			return nil, fmt.Errorf("a window size goes with unit %q only", Window)
		}
	case Window:
		if o.Window < 1 {
			return nil, fmt.Errorf("unit %q needs a window of 1 token or more, got %d", Window, o.Window)
		}
	default:
		return nil, fmt.Errorf("unknown unit %q: want line, document or window", o.Unit)
	}
	if o.MaxChars < 1 {
		return nil, fmt.Errorf("the longest piece must be at least 1 character, got %d", o.MaxChars)
	}
	if o.Context < 0 {
		return nil, fmt.Errorf("the context must be 0 or more tokens, got %d", o.Context)
	}
	s := &Scorer{lm: lm, kind: kind, vocab: v, o: o, newline: -1, skipText: -1, emit: emit}
	s.batch, _ = lm.(BatchModel)
	if id, ok := v.ID("\n"); ok {
		s.newline = id
	}
	if o.Unit == Line {
		if s.newline < 0 {
			return nil, ErrNoLineEnd
		}
		s.skipText = s.newline
	}
	return s, nil
}

// ErrNoLineEnd is New's error for line units with a vocabulary that has
// no line-end entry.
var ErrNoLineEnd = fmt.Errorf("the model's vocabulary has no line-end entry, so it cannot score lines")

// Score encodes and scores the input r, named source in the rows. Context
// never crosses inputs. It returns false when r held no token. Rows of
// pieces still being scored are emitted by a later Score or by Flush.
func (s *Scorer) Score(ctx context.Context, r io.Reader, source string) (bool, error) {
	v := s.vocab
	s.recent = s.recent[:0]
	line := 1
	inUnit := 0 // tokens in the current unit
	any := false
	var failed error
	s.lines, s.lineBuf, s.lineRune = s.lines[:0], s.lineBuf[:0], 0
	var text func([]byte)
	if s.o.Unit == Line {
		text = s.readLines
	}
	err := v.EncodeReaderText(ctx, r, source, text, func(id, chars int) {
		if failed != nil {
			return
		}
		any = true
		if inUnit == 0 {
			s.start(ctx, source, line)
		}
		if failed = s.add(ctx, id, chars); failed != nil {
			return
		}
		inUnit++
		if id == s.newline {
			line++
		}
		switch {
		case s.o.Unit == Line && id == s.newline,
			s.o.Unit == Window && inUnit == s.o.Window:
			failed = s.end()
			inUnit = 0
		}
	})
	if err == nil {
		err = failed
	}
	if err != nil {
		return any, err
	}
	if inUnit == 0 {
		return any, nil
	}
	if s.o.Unit == Document && v.Boundary() >= 0 && v.Piece(v.Boundary()) == data.DocumentPiece {
		// The document end, as the corpus pipeline adds it.
		if err := s.add(ctx, v.Boundary(), 0); err != nil {
			return any, err
		}
	}
	return any, s.end()
}

// readLines keeps the text of the lines read, for line units.
func (s *Scorer) readLines(p []byte) {
	for len(p) > 0 {
		i := bytes.IndexByte(p, '\n')
		part := p
		if i >= 0 {
			part = p[:i]
		}
		for len(part) > 0 && s.lineRune <= TextLimit {
			_, n := utf8.DecodeRune(part)
			s.lineBuf = append(s.lineBuf, part[:n]...)
			part = part[n:]
			s.lineRune++
		}
		if i < 0 {
			return
		}
		s.lines = append(s.lines, string(s.lineBuf))
		s.lineBuf, s.lineRune = s.lineBuf[:0], 0
		p = p[i+1:]
	}
}

// Flush waits for every piece handed over and emits the rows they finish.
func (s *Scorer) Flush() error {
	if err := s.dispatch(); err != nil {
		return err
	}
	for len(s.queue) > 0 {
		if err := s.consumeOldest(); err != nil {
			return err
		}
	}
	return nil
}

func (s *Scorer) newPiece(ctx context.Context) *piece {
	var p *piece
	if n := len(s.free); n > 0 {
		p = s.free[n-1]
		s.free = s.free[:n-1]
		*p = piece{warm: p.warm[:0], tokens: p.tokens[:0], chars: p.chars[:0], logp: p.logp[:0]}
	} else {
		p = &piece{}
	}
	p.ctx = ctx
	p.warm = append(p.warm[:0], s.recent...)
	return p
}

// start begins a unit at line of source.
func (s *Scorer) start(ctx context.Context, source string, line int) {
	s.cur = s.newPiece(ctx)
	s.cur.first, s.cur.source, s.cur.line = true, source, line
}

// add appends one token of the current unit, handing the piece over first
// when the token would take it past MaxChars.
func (s *Scorer) add(ctx context.Context, id, chars int) error {
	if s.cur.nchars+chars > s.o.MaxChars && len(s.cur.tokens) > 0 {
		if err := s.submit(s.cur); err != nil {
			return err
		}
		s.cur = s.newPiece(ctx)
	}
	p := s.cur
	p.tokens = append(p.tokens, id)
	p.chars = append(p.chars, chars)
	p.nchars += chars
	if s.o.Context > 0 {
		if len(s.recent) == s.o.Context {
			copy(s.recent, s.recent[1:])
			s.recent = s.recent[:s.o.Context-1]
		}
		s.recent = append(s.recent, id)
	}
	return nil
}

// end ends the current unit; its row goes to emit once its pieces are
// scored (a unit without tokens gives no row).
func (s *Scorer) end() error {
	p := s.cur
	s.cur = nil
	p.last = true
	if s.o.Unit == Line {
		if len(s.lines) > 0 {
			p.text = s.lines[0]
			s.lines = s.lines[1:]
		} else { // the last line, without a line end
			p.text = string(s.lineBuf)
		}
	}
	return s.submit(p)
}

func (s *Scorer) submit(p *piece) error {
	if s.batch != nil {
		s.pending = append(s.pending, p)
		s.pendingTokens += len(p.warm) + len(p.tokens)
		if len(s.pending) < BatchPieces && s.pendingTokens < BatchTokens {
			return nil
		}
		return s.dispatch()
	}
	if s.o.Workers <= 1 {
		s.compute(p)
		return s.consume(p)
	}
	if s.sem == nil {
		s.sem = make(chan struct{}, s.o.Workers)
	}
	p.done = make(chan struct{})
	s.queue = append(s.queue, p)
	s.sem <- struct{}{}
	go func() {
		s.compute(p)
		<-s.sem
		close(p.done)
	}()
	for len(s.queue) > 2*s.o.Workers {
		if err := s.consumeOldest(); err != nil {
			return err
		}
	}
	return nil
}

// dispatch hands the pending pieces to the model as one batch: scored at
// once with one worker, else on a goroutine of their own (up to Workers
// batches at a time), consumed in order.
func (s *Scorer) dispatch() error {
	ps := s.pending
	s.pending, s.pendingTokens = nil, 0
	if len(ps) == 0 {
		return nil
	}
	if s.o.Workers <= 1 {
		s.computeBatch(ps)
		for _, p := range ps {
			if err := s.consume(p); err != nil {
				return err
			}
		}
		return nil
	}
	if s.sem == nil {
		s.sem = make(chan struct{}, s.o.Workers)
	}
	done := make(chan struct{})
	for _, p := range ps {
		p.done = done
	}
	s.queue = append(s.queue, ps...)
	s.sem <- struct{}{}
	go func() {
		s.computeBatch(ps)
		<-s.sem
		close(done)
	}()
	for len(s.queue) > 2*s.o.Workers*BatchPieces {
		if err := s.consumeOldest(); err != nil {
			return err
		}
	}
	return nil
}

func (s *Scorer) consumeOldest() error {
	p := s.queue[0]
	<-p.done
	s.queue = s.queue[1:]
	return s.consume(p)
}

// compute scores one piece from the start of a document with the model's
// LogProbs: the code weft eval scores a split with.
func (s *Scorer) compute(p *piece) {
	n := len(p.tokens)
	if n == 0 {
		p.logp = p.logp[:0]
		return
	}
	if len(p.warm) == 0 {
		p.logp = slices.Grow(p.logp[:0], n)[:n]
		p.err = s.lm.LogProbs(p.ctx, p.logp, p.tokens)
		return
	}
	// Score the context and the piece as one sequence and keep the piece's
	// part: the piece is predicted from the state the context leaves.
	w := len(p.warm)
	seq := append(slices.Clip(p.warm), p.tokens...)
	lp := make([]float64, len(seq))
	p.err = s.lm.LogProbs(p.ctx, lp, seq)
	p.logp = append(p.logp[:0], lp[w:]...)
}

// consume adds a scored piece to its unit, totalled by eval.NewResult as
// weft eval totals a split, and emits the row after the unit's last piece.
func (s *Scorer) consume(p *piece) error {
	defer func() { s.free = append(s.free, p) }()
	if p.err != nil {
		return p.err
	}
	if p.first {
		s.acc.begin(p.source, p.line)
	}
	s.acc.add(s.lm.Name(), s.kind, s.vocab, s.o.Unit != Document, s.skipText, p.tokens, p.chars, p.nchars, p.logp)
	if !p.last || s.acc.row.Tokens == 0 {
		return nil
	}
	r := s.acc.finish(s.o.Unit != Document)
	if s.o.Unit == Line {
		r.Text = lineText(p.text) // the line as it was read
	}
	r.Seq = s.seq
	s.seq++
	return s.emit(r)
}
