package rnn

import (
	"context"
	"fmt"

	"weft/rnn/linalg"
)

// scoreChunk is the number of steps LogProbs runs per forward pass.
const scoreChunk = 64

// SetScoring sets how LogProbs splits a long sequence to score it faster:
// into streams continuous pieces scored side by side, each piece after the
// first warmed up by running over the warmup tokens before it (not scored)
// from a zero state. streams = 1 (the default) is exact: the state runs
// through the whole sequence. With streams > 1 the piece boundaries are
// approximated: the state at a piece start is the one warmup tokens of
// context give, not the whole history. Pieces are never shorter than
// warmup tokens; LogProbs uses fewer streams when the sequence is short.
func (m *Model[T]) SetScoring(streams, warmup int) error {
	if streams < 1 {
		return fmt.Errorf("scoring streams must be at least 1, got %d", streams)
	}
	if warmup < 0 {
		return fmt.Errorf("scoring warm-up must be 0 or more tokens, got %d", warmup)
	}
	m.scoreS, m.scoreWarm = streams, warmup
	return nil
}

// LogProbs writes to dst[i] the natural logarithm of P(seq[i] | seq[:i])
// under the model, for every i, forward only and with dropout off. The
// history before seq[0] is the start of a document: a zero state, whose
// output distribution is softmax(output.bias) (for the class layer, the
// product of the class and word softmaxes of the biases). len(dst) must equal
// len(seq). See SetScoring for the exact default and the faster
// approximation. It checks ctx between passes.
func (m *Model[T]) LogProbs(ctx context.Context, dst []float64, seq []int) error {
	if len(dst) != len(seq) {
		return fmt.Errorf("LogProbs: %d destinations for %d tokens", len(dst), len(seq))
	}
	for i, tok := range seq {
		if tok < 0 || tok >= m.vocab {
			return fmt.Errorf("LogProbs: token %d at position %d outside the vocabulary 0..%d", tok, i, m.vocab-1)
		}
	}
	return m.score(ctx, len(seq), func(w []int, off int) error {
		copy(w, seq[off:])
		return nil
	}, func(pos int, lp float64) { dst[pos] = lp })
}

// A TokenReader gives a sequence of token ids window by window: Read sets
// dst to the ids from off on. data.Tokens, the prepared splits' form, is
// one.
type TokenReader interface {
	Len() int
	Read(dst []int, off int)
}

// LogProbsEach scores the sequence seq gives as LogProbs does, reading it
// window by window instead of holding it, and calls visit with each
// position and the natural logarithm of its probability, instead of
// storing them. With one scoring stream (the default; see SetScoring) the
// positions come in order; with several, stream after stream within each
// pass. The numbers are LogProbs's, bit for bit.
func (m *Model[T]) LogProbsEach(ctx context.Context, seq TokenReader, visit func(pos int, logProb float64)) error {
	return m.score(ctx, seq.Len(), func(w []int, off int) error {
		seq.Read(w, off)
		for i, tok := range w {
			if tok < 0 || tok >= m.vocab {
				return fmt.Errorf("LogProbs: token %d at position %d outside the vocabulary 0..%d", tok, off+i, m.vocab-1)
			}
		}
		return nil
	}, visit)
}

// score runs LogProbs over n tokens that read gives window by window (it
// sets w to the ids from off on), handing each position's log-probability
// to emit.
func (m *Model[T]) score(ctx context.Context, n int, read func(w []int, off int) error, emit func(pos int, lp float64)) error {
	if n == 0 {
		return nil
	}
	var first [1]int
	if err := read(first[:], 0); err != nil {
		return err
	}
	emit(0, m.startLogProb(first[0]))
	P := n - 1 // positions 1..n-1 remain
	if P == 0 {
		return nil
	}
	S, W := min(m.scoreS, P), m.scoreWarm
	L := (P + S - 1) / S
	for S > 1 && L < W {
		S--
		L = (P + S - 1) / S
	}
	S = (P + L - 1) / L // every stream gets at least one position (L unchanged)
	if S == 1 {
		W = 0
	}
	B := S
	w := newWork(m, B, min(scoreChunk, max(L, W)), false)
	in := make([]int, w.max*B)
	// win holds each stream's window of the pass: its inputs and, one
	// further on, its last target.
	win := make([]int, (w.max+1)*B)
	var tg []int
	var lp []float64
	if w.cls != nil {
		tg, lp = make([]int, w.max*B), make([]float64, w.max*B)
	}
	// Warm-up: stream k ≥ 1 reads seq[kL−W .. kL−1]; stream 0 reads
	// anything and is reset afterwards.
	for t0 := 0; t0 < W; t0 += w.max {
		c := min(w.max, W-t0)
		for k := 1; k < B; k++ {
			if err := read(win[k*(w.max+1):k*(w.max+1)+c], k*L-W+t0); err != nil {
				return err
			}
		}
		for t := 0; t < c; t++ {
			for k := 0; k < B; k++ {
				tok := 0
				if k > 0 {
					tok = win[k*(w.max+1)+t]
				}
				in[t*B+k] = tok
			}
		}
		w.forward(m.pool, in, c, false)
		w.carry(c)
		if err := ctx.Err(); err != nil {
			return err
		}
	}
	if W > 0 {
		w.resetStreams([]bool{true})
	}
	// Scoring: at step t stream k reads seq[kL+t] and predicts seq[kL+t+1].
	V := m.vocab
	for t0 := 0; t0 < L; t0 += w.max {
		c := min(w.max, L-t0)
		for k := 0; k < B; k++ {
			// Stream k's window: seq[kL+t0 .. kL+t0+c], cut at the end.
			at := k*L + t0
			got := max(0, min(c+1, n-at))
			wk := win[k*(w.max+1) : k*(w.max+1)+c+1]
			if got > 0 {
				if err := read(wk[:got], at); err != nil {
					return err
				}
			}
			clear(wk[got:])
		}
		for t := 0; t < c; t++ {
			for k := 0; k < B; k++ {
				i := k*L + t0 + t
				tok := 0
				if i+1 < n {
					tok = win[k*(w.max+1)+t]
				}
				in[t*B+k] = tok
			}
		}
		w.forward(m.pool, in, c, false)
		if w.cls != nil {
			for t := 0; t < c; t++ {
				for k := 0; k < B; k++ {
					pos := k*L + t0 + t + 1
					tg[t*B+k] = -1
					if pos < n && pos <= (k+1)*L {
						tg[t*B+k] = win[k*(w.max+1)+t+1]
					}
				}
			}
			w.classLogProbs(m.pool, lp, tg, c*B)
		}
		for t := 0; t < c; t++ {
			for k := 0; k < B; k++ {
				pos := k*L + t0 + t + 1
				if pos < n && pos <= (k+1)*L {
					r := t*B + k
					if w.cls != nil {
						emit(pos, lp[r])
					} else {
						emit(pos, logSoftmaxAt(w.logits[r*V:(r+1)*V], win[k*(w.max+1)+t+1]))
					}
				}
			}
		}
		w.carry(c)
		if err := ctx.Err(); err != nil {
			return err
		}
	}
	return nil
}

// logSoftmaxAt returns ln softmax(row)[j] = row[j] − ln Σ exp(row), in
// float64 with the maximum subtracted first.
func logSoftmaxAt[T Float](row []T, j int) float64 {
	return float64(row[j]) - logSumExp(row)
}

// logSumExp is linalg.LogSumExp: ln Σ exp(row) in float64, the maximum
// subtracted first, every term math.Exp's and added in order, so that
// every scoring path (LogProbs, the batched scorer, the class layer, the
// streams) gets the same bits from it.
func logSumExp[T Float](row []T) float64 { return linalg.LogSumExp(row) }
