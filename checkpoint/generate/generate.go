// Package generate continues a prompt with a trained model: drawn samples
// (temperature, top-k, top-p, seeded) or a beam search, each continuation
// ending at a length in tokens or characters, at the vocabulary's boundary,
// or just before a stop string. It is the engine of 'weft sample', for any
// model loaded from a checkpoint.
//
// Generated text can be wrong, biased or offensive: it reflects the corpus
// the model was trained on, mistakes and prejudices included, and says
// nothing true by itself. Have a person review it before any use.
package generate

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"strconv"
	"strings"

	"weft/checkpoint"
	"weft/rnn"
)

// PCGStream is the second PCG seed word of a seeded draw: seed S seeds
// PCG(S, PCGStream), so a seed names one sequence of draws everywhere weft
// samples.
const PCGStream = 0x7765667473616d70 // "weftsamp"

// Length is how long a continuation may grow: N tokens, or N characters.
type Length struct {
	N     int
	Chars bool
}

// ParseLength reads "200" (tokens) or "200c" (characters).
func ParseLength(s string) (Length, error) {
	l := Length{}
	t := s
	if strings.HasSuffix(t, "c") {
		l.Chars, t = true, strings.TrimSuffix(t, "c")
	}
	n, err := strconv.Atoi(t)
	if err != nil || n < 1 {
		return l, fmt.Errorf("want a positive number of tokens (200) or characters (200c), got %q", s)
	}
	l.N = n
	return l, nil
}

// MaxTokens is the most tokens a continuation of l may take: l.N tokens,
// or enough for l.N characters of four-byte characters one byte token each.
func (l Length) MaxTokens() int {
	if l.Chars {
		return 4*l.N + 16
	}
	return l.N
}

// Options say how to continue a prompt.
type Options struct {
	Length  Length
	Samples int // continuations to make, at least 1
	// Sampling is how tokens are drawn; ignored by a beam search.
	Sampling rnn.Sampling
	Seed     uint64
	// Beam is the width of a beam search instead of drawing; 0 draws.
	Beam int
	// Stop ends a continuation just before the first of these texts.
	Stop []string
}

// Validate checks o.
func (o Options) Validate() error {
	switch {
	case o.Length.N < 1:
		return errors.New("the length must be at least 1")
	case o.Samples < 1:
		return fmt.Errorf("the number of continuations must be at least 1, got %d", o.Samples)
	case o.Beam < 0:
		return fmt.Errorf("the beam width must be 0 (off) or 1 or more, got %d", o.Beam)
	case o.Beam > 0 && o.Samples > o.Beam:
		return fmt.Errorf("%d continuations is more than the beam keeps (%d)", o.Samples, o.Beam)
	}
	for _, s := range o.Stop {
		if s == "" {
			return errors.New("a stop text must not be empty")
		}
	}
	if o.Beam == 0 {
		return o.Sampling.Validate()
	}
	return nil
}

// Token is one generated token.
type Token struct {
	ID      int     `json:"id"`
	Text    string  `json:"text"`         // what it adds to the text; "" for the boundary
	LogProb float64 `json:"logprob_nats"` // ln of its probability given everything before it
}

// Continuation is one continuation of a prompt.
type Continuation struct {
	Text string // the generated text, without the prompt, cut before a stop text
	// Stop says why it ended: "length", "boundary" (the model ended the
	// line or document) or "stop_string".
	Stop    string
	Tokens  []Token // every token drawn, the boundary included
	LogProb float64 // the sum of the tokens' log-probabilities, nats
}

// Continue continues prompt (already encoded) with m as o says, calling
// emit with each finished continuation in turn. With stream non-nil, the
// text of drawn continuations is also passed to it as it is generated, as
// soon as no stop text can begin in it (a beam search streams nothing: its
// continuations are known only at the end).
func Continue(ctx context.Context, m *checkpoint.Model, prompt []int, o Options, stream func(sample int, text string) error, emit func(sample int, c Continuation) error) error {
	if err := o.Validate(); err != nil {
		return err
	}
	if o.Beam > 0 {
		return beam(ctx, m, prompt, o, emit)
	}
	sp, err := rnn.NewSampler(o.Sampling, rand.New(rand.NewPCG(o.Seed, PCGStream)))
	if err != nil {
		return err
	}
	primed := m.Net.NewStream(1)
	if err := rnn.Prime(ctx, primed, prompt); err != nil {
		return err
	}
	v := m.Vocab
	last := -1
	if len(prompt) > 0 {
		last = prompt[len(prompt)-1]
	}
	for i := 1; i <= o.Samples; i++ {
		st := &stopText{stops: o.Stop}
		if stream != nil {
			st.out = func(s string) error { return stream(i, s) }
		}
		c := Continuation{Stop: "length", Tokens: []Token{}}
		prev, chars := last, 0
		_, err := rnn.Generate(ctx, primed.Clone(), sp, o.Length.MaxTokens(), func(tk rnn.Token) (bool, error) {
			t := ""
			if tk.ID != v.Boundary() {
				t = v.TokenText(prev, tk.ID)
			}
			c.Tokens = append(c.Tokens, Token{ID: tk.ID, Text: t, LogProb: tk.LogProb})
			c.LogProb += tk.LogProb
			prev = tk.ID
			if tk.ID == v.Boundary() {
				c.Stop = "boundary"
				return true, nil
			}
			chars += v.Chars(tk.ID)
			stop, err := st.add(t)
			if stop {
				c.Stop = "stop_string"
			}
			return stop || (o.Length.Chars && chars >= o.Length.N), err
		})
		if err != nil {
			return err
		}
		if err := st.finish(); err != nil {
			return err
		}
		c.Text = string(st.text)
		if err := emit(i, c); err != nil {
			return err
		}
	}
	return nil
}

// beam continues prompt by a beam search, emitting its best o.Samples
// hypotheses, best first.
func beam(ctx context.Context, m *checkpoint.Model, prompt []int, o Options, emit func(int, Continuation) error) error {
	v := m.Vocab
	cfg := rnn.BeamConfig{Width: o.Beam, MaxTokens: o.Length.MaxTokens(), End: v.Boundary()}
	if o.Length.Chars {
		cfg.Chars, cfg.MaxChars = v.Chars, o.Length.N
	}
	hyps, err := rnn.BeamSearch(ctx, m.Net, prompt, cfg)
	if err != nil {
		return err
	}
	last := -1
	if len(prompt) > 0 {
		last = prompt[len(prompt)-1]
	}
	for i, h := range hyps[:min(o.Samples, len(hyps))] {
		c := Continuation{Stop: "length", Tokens: []Token{}}
		st := &stopText{stops: o.Stop}
		prev, stopped := last, false
		for _, tk := range h.Tokens {
			t := ""
			if tk.ID != v.Boundary() {
				t = v.TokenText(prev, tk.ID)
			} else {
				c.Stop = "boundary"
			}
			prev = tk.ID
			if !stopped {
				c.Tokens = append(c.Tokens, Token{ID: tk.ID, Text: t, LogProb: tk.LogProb})
				c.LogProb += tk.LogProb
				if s, _ := st.add(t); s {
					stopped, c.Stop = true, "stop_string"
				}
			}
		}
		c.Text = string(st.text)
		if err := emit(i+1, c); err != nil {
			return err
		}
	}
	return nil
}

// stopText collects a continuation's text, passing it to out (when not
// nil) as soon as no stop string can begin in it, and cuts it before the
// first stop string.
type stopText struct {
	stops   []string
	out     func(string) error
	text    []byte
	written int
}

// add appends s and reports whether a stop string now occurs; the text is
// then cut just before it.
func (st *stopText) add(s string) (bool, error) {
	old := len(st.text)
	st.text = append(st.text, s...)
	cut := -1
	for _, stop := range st.stops {
		from := max(0, old-len(stop)+1)
		if i := bytes.Index(st.text[from:], []byte(stop)); i >= 0 && (cut < 0 || from+i < cut) {
			cut = from + i
		}
	}
	if cut >= 0 {
		st.text = st.text[:cut]
		return true, st.flush(cut)
	}
	// Hold back the longest tail that could start a stop string.
	safe := len(st.text)
	for _, stop := range st.stops {
		for k := min(len(stop)-1, len(st.text)); k > 0; k-- {
			if bytes.HasSuffix(st.text, []byte(stop[:k])) {
				safe = min(safe, len(st.text)-k)
				break
			}
		}
	}
	return false, st.flush(max(safe, st.written))
}

func (st *stopText) flush(upto int) error {
	if st.out == nil || upto <= st.written {
		return nil
	}
	err := st.out(string(st.text[st.written:upto]))
	st.written = upto
	return err
}

// finish passes on what is held back.
func (st *stopText) finish() error { return st.flush(len(st.text)) }
