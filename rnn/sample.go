package rnn

import "fmt"

// Stream is a forward-only running state of a model for n parallel
// hypotheses, for sampling and beam search: Feed advances every hypothesis
// by one token, LogProbs gives each one's next-token distribution, Select
// reorders or duplicates hypotheses and Clone copies the whole stream.
// Dropout is off. A new Stream is at the start of a document (zero state),
// where the distribution is softmax(output.bias). Feed, LogProbs and Select
// allocate nothing. A Stream is not safe for concurrent use; several
// Streams of one model are.
type Stream[T Float] struct {
	m   *Model[T]
	w   *work[T]
	n   int
	tmp []T
}

// NewStream returns a stream of n ≥ 1 hypotheses at the start of a
// document. It runs on the pool set by SetPool.
func (m *Model[T]) NewStream(n int) *Stream[T] {
	if n < 1 {
		panic("rnn: NewStream needs at least one hypothesis")
	}
	s := &Stream[T]{m: m, w: newWork(m, n, 1, false), n: n}
	if s.w.cls != nil {
		// The class layer keeps the whole distribution of every
		// hypothesis, as log-probabilities.
		s.w.logits, s.w.full = make([]T, n*m.vocab), true
	}
	s.tmp = make([]T, n*max(m.vocab, m.cfg.HiddenSize))
	s.Reset()
	return s
}

// Len is the number of hypotheses.
func (s *Stream[T]) Len() int { return s.n }

// Reset puts every hypothesis back at the start of a document.
func (s *Stream[T]) Reset() {
	s.w.resetAll()
	V := s.m.vocab
	for i := 0; i < s.n; i++ {
		s.m.startRow(s.w.logits[i*V : (i+1)*V])
	}
}

// Feed advances hypothesis i by tokens[i]; len(tokens) must be Len().
func (s *Stream[T]) Feed(tokens []int) error {
	if len(tokens) != s.n {
		return fmt.Errorf("stream has %d hypotheses, fed %d tokens", s.n, len(tokens))
	}
	for i, tok := range tokens {
		if tok < 0 || tok >= s.m.vocab {
			return fmt.Errorf("stream: token %d for hypothesis %d outside the vocabulary 0..%d", tok, i, s.m.vocab-1)
		}
	}
	s.w.forward(s.m.pool, tokens, 1, false)
	s.w.carry(1)
	return nil
}

// LogProbs writes the natural-log next-token distribution of every
// hypothesis to dst, Len()×VocabSize values, hypothesis-major:
// dst[i*V+j] = ln P(j | hypothesis i).
func (s *Stream[T]) LogProbs(dst []float64) {
	V := s.m.vocab
	if len(dst) != s.n*V {
		panic(fmt.Sprintf("rnn: Stream.LogProbs: dst has %d values, want %d", len(dst), s.n*V))
	}
	for i := 0; i < s.n; i++ {
		row := s.w.logits[i*V : (i+1)*V]
		z := logSumExp(row)
		d := dst[i*V : (i+1)*V]
		for j, v := range row {
			d[j] = float64(v) - z
		}
	}
}

// Select makes hypothesis i a copy of old hypothesis from[i], for every i
// (as a beam search keeps its best candidates); len(from) must be Len().
func (s *Stream[T]) Select(from []int) error {
	if len(from) != s.n {
		return fmt.Errorf("stream has %d hypotheses, select gave %d", s.n, len(from))
	}
	for i, f := range from {
		if f < 0 || f >= s.n {
			return fmt.Errorf("stream: select %d for hypothesis %d, have 0..%d", f, i, s.n-1)
		}
	}
	gather := func(buf []T, width int) {
		tmp := s.tmp[:s.n*width]
		copy(tmp, buf[:s.n*width])
		for i, f := range from {
			copy(buf[i*width:(i+1)*width], tmp[f*width:(f+1)*width])
		}
	}
	H := s.m.cfg.HiddenSize
	for l := range s.w.layers {
		gather(s.w.layers[l].h, H)
		if s.w.layers[l].c != nil {
			gather(s.w.layers[l].c, H)
		}
	}
	gather(s.w.logits, s.m.vocab)
	return nil
}

// Clone returns an independent copy of the stream.
func (s *Stream[T]) Clone() *Stream[T] {
	c := s.m.NewStream(s.n)
	n := s.n * s.m.cfg.HiddenSize
	for l := range s.w.layers {
		copy(c.w.layers[l].h[:n], s.w.layers[l].h[:n])
		if s.w.layers[l].c != nil {
			copy(c.w.layers[l].c[:n], s.w.layers[l].c[:n])
		}
	}
	copy(c.w.logits, s.w.logits)
	return c
}
