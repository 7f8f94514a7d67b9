package rnn

import (
	"context"
	"math"
	"testing"

	"weft/eval"
)

// inferTol bounds float64 differences between two evaluation orders of the
// same model (chunked passes against one token at a time).
const inferTol = 1e-12

func inferModel(t *testing.T, cell string) *Model[float64] {
	t.Helper()
	c := DefaultConfig()
	c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize, c.ProjectionSize = cell, 2, 12, 6, 5
	c.Init, c.InitRange, c.RecurrentInit = "uniform", 0.4, "uniform"
	m, err := NewModel[float64](c, 9, 3)
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.outB { // a non-uniform start-of-document distribution
		m.outB[i] = 0.1 * float64(i)
	}
	return m
}

func TestLogProbsMatchesStream(t *testing.T) {
	seq := randomTokens(150, 9, 8) // more than two scoring chunks
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		t.Run(cell, func(t *testing.T) {
			m := inferModel(t, cell)
			got := make([]float64, len(seq))
			if err := m.LogProbs(context.Background(), got, seq); err != nil {
				t.Fatal(err)
			}
			s := m.NewStream(1)
			dist := make([]float64, 9)
			for i, tok := range seq {
				s.LogProbs(dist)
				// A distribution: probabilities sum to 1 (fact of the trade).
				var sum float64
				for _, v := range dist {
					sum += math.Exp(v)
				}
				if !closeTo(sum, 1, 1e-12) {
					t.Fatalf("position %d: probabilities sum to %v", i, sum)
				}
				if !closeTo(got[i], dist[tok], inferTol) {
					t.Fatalf("position %d: LogProbs %v, stream %v", i, got[i], dist[tok])
				}
				if err := s.Feed([]int{tok}); err != nil {
					t.Fatal(err)
				}
			}
			// The first position is scored from the zero state:
			// softmax(output.bias).
			if want := logSoftmaxAt(m.outB, seq[0]); got[0] != want {
				t.Errorf("position 0: got %v, want %v", got[0], want)
			}
			// The mean of −LogProbs over positions 1.. is the training loss of
			// the same sequence as one window from a zero state.
			w := newWork(m, 1, len(seq)-1, true)
			w.forward(nil, seq[:len(seq)-1], len(seq)-1, false)
			total, n := w.loss(seq[1:])
			var sum float64
			for _, v := range got[1:] {
				sum -= v
			}
			if !closeTo(sum/float64(len(seq)-1), total/float64(n), 1e-12) {
				t.Errorf("mean −ln p %v, window loss %v", sum/float64(len(seq)-1), total/float64(n))
			}
		})
	}
}

func TestLogProbsStreams(t *testing.T) {
	seq := randomTokens(301, 9, 9)
	m := inferModel(t, "lstm")
	ctx := context.Background()
	exact := make([]float64, len(seq))
	if err := m.LogProbs(ctx, exact, seq); err != nil {
		t.Fatal(err)
	}
	// 3 streams of L = 100 positions with a 40-token warm-up.
	if err := m.SetScoring(3, 40); err != nil {
		t.Fatal(err)
	}
	approx := make([]float64, len(seq))
	if err := m.LogProbs(ctx, approx, seq); err != nil {
		t.Fatal(err)
	}
	differ, meanDiff := 0, 0.0
	for i := range seq {
		switch {
		case i <= 100: // stream 0 carries the true state from the start
			if !closeTo(approx[i], exact[i], inferTol) {
				t.Errorf("position %d (stream 0): got %v, want the exact %v", i, approx[i], exact[i])
			}
		default:
			if !(approx[i] <= 0) || math.IsInf(approx[i], 0) {
				t.Errorf("position %d: ln p = %v", i, approx[i])
			}
			if approx[i] != exact[i] {
				differ++
			}
			meanDiff += math.Abs(approx[i]-exact[i]) / 200
		}
	}
	// After a 40-token warm-up the state is close to the true one: a
	// property of this small model (its memory fades), not a reference
	// value; the bound is about 9x the 1.1e-4 observed.
	if meanDiff > 1e-3 {
		t.Errorf("warmed streams: mean |Δ ln p| %.3g, want below 1e-3", meanDiff)
	}
	t.Logf("3 streams, warm-up 40: mean |Δ ln p| = %.3g nats", meanDiff)
	if differ == 0 {
		t.Error("3 streams gave exactly the 1-stream values: the split did not happen")
	}
	// A warm-up longer than the pieces leaves one stream: exact again.
	_ = m.SetScoring(4, 1000)
	if err := m.LogProbs(ctx, approx, seq); err != nil {
		t.Fatal(err)
	}
	for i := range seq {
		if approx[i] != exact[i] {
			t.Fatalf("position %d: got %v, want %v", i, approx[i], exact[i])
		}
	}
	if err := m.LogProbs(ctx, approx[:3], seq); err == nil {
		t.Error("LogProbs accepted a short destination")
	}
	if err := m.LogProbs(ctx, approx[:2], []int{0, 9}); err == nil || err.Error() != "LogProbs: token 9 at position 1 outside the vocabulary 0..8" {
		t.Errorf("bad token: got %v", err)
	}
}

func TestStreamSelectClone(t *testing.T) {
	m := inferModel(t, "gru")
	V := m.VocabSize()
	s := m.NewStream(3)
	for _, toks := range [][]int{{1, 2, 3}, {4, 5, 6}} {
		if err := s.Feed(toks); err != nil {
			t.Fatal(err)
		}
	}
	before := make([]float64, 3*V)
	s.LogProbs(before)
	c := s.Clone()
	if err := s.Select([]int{2, 2, 0}); err != nil {
		t.Fatal(err)
	}
	after := make([]float64, 3*V)
	s.LogProbs(after)
	for i, from := range []int{2, 2, 0} {
		for j := 0; j < V; j++ {
			if after[i*V+j] != before[from*V+j] {
				t.Fatalf("hypothesis %d after Select: token %d %v, want %v", i, j, after[i*V+j], before[from*V+j])
			}
		}
	}
	// Feeding the same token continues identically from copied states.
	_ = s.Feed([]int{7, 7, 7})
	s.LogProbs(after)
	for j := 0; j < V; j++ {
		if after[j] != after[V+j] {
			t.Fatalf("hypotheses 0 and 1 diverged after the same token")
		}
	}
	// The clone kept the state from before Select and Feed.
	got := make([]float64, 3*V)
	c.LogProbs(got)
	for i := range got {
		if got[i] != before[i] {
			t.Fatalf("clone changed with its original: %d: %v vs %v", i, got[i], before[i])
		}
	}
}

// The model satisfies eval.LanguageModel, the interface every scorer uses.
var _ eval.LanguageModel = (*Model[float32])(nil)

// TestLogProbsSplitCoversEveryPosition tries many lengths, stream counts
// and warm-ups: every position gets a log-probability, and the first
// piece (which starts at the true start of the document) is exact.
func TestLogProbsSplitCoversEveryPosition(t *testing.T) {
	m := inferModel(t, "rnn")
	ctx := context.Background()
	seq := randomTokens(200, 9, 10)
	for _, n := range []int{1, 2, 3, 7, 64, 65, 130, 200} {
		exact := make([]float64, n)
		if err := m.SetScoring(1, 0); err != nil {
			t.Fatal(err)
		}
		if err := m.LogProbs(ctx, exact, seq[:n]); err != nil {
			t.Fatal(err)
		}
		for _, s := range []int{2, 3, 5, 16} {
			for _, w := range []int{0, 1, 9, 70} {
				_ = m.SetScoring(s, w)
				got := make([]float64, n)
				for i := range got {
					got[i] = math.NaN()
				}
				if err := m.LogProbs(ctx, got, seq[:n]); err != nil {
					t.Fatal(err)
				}
				// The first piece covers positions 0..L with L = ⌈(n−1)/S′⌉ for the
				// S′ ≤ S streams used; at least position 0 and 1 are in it.
				for i, v := range got {
					if math.IsNaN(v) || v > 0 {
						t.Fatalf("n=%d streams=%d warmup=%d: position %d has ln p = %v", n, s, w, i, v)
					}
				}
				for i := 0; i < min(n, 2); i++ {
					if !closeTo(got[i], exact[i], inferTol) {
						t.Fatalf("n=%d streams=%d warmup=%d: position %d %v, exact %v", n, s, w, i, got[i], exact[i])
					}
				}
			}
		}
	}
}

// TestStreamHypothesesIndependent feeds three different sequences to one
// three-hypothesis Stream: each row must score as its sequence does alone.
func TestStreamHypothesesIndependent(t *testing.T) {
	m := inferModel(t, "lstm")
	V := m.VocabSize()
	const n, length = 3, 40
	seqs := [n][]int{randomTokens(length, V, 31), randomTokens(length, V, 32), randomTokens(length, V, 33)}
	want := make([][]float64, n)
	for i := range seqs {
		want[i] = make([]float64, length)
		if err := m.LogProbs(context.Background(), want[i], seqs[i]); err != nil {
			t.Fatal(err)
		}
	}
	s := m.NewStream(n)
	dist := make([]float64, n*V)
	toks := make([]int, n)
	for p := 0; p < length; p++ {
		s.LogProbs(dist)
		for i := range seqs {
			if got := dist[i*V+seqs[i][p]]; !closeTo(got, want[i][p], inferTol) {
				t.Fatalf("hypothesis %d position %d: %v, alone %v", i, p, got, want[i][p])
			}
			toks[i] = seqs[i][p]
		}
		if err := s.Feed(toks); err != nil {
			t.Fatal(err)
		}
	}
}

// windowReader is a TokenReader over a slice that records the longest read.
type windowReader struct {
	ids     []int
	longest int
}

func (r *windowReader) Len() int { return len(r.ids) }
func (r *windowReader) Read(dst []int, off int) {
	r.longest = max(r.longest, len(dst))
	copy(dst, r.ids[off:off+len(dst)])
}

// TestLogProbsEachMatchesLogProbs: scoring from windows gives LogProbs's
// numbers bit for bit, in position order with one stream, and never reads
// more than a pass's window at once.
func TestLogProbsEachMatchesLogProbs(t *testing.T) {
	ctx := context.Background()
	for _, cell := range []string{"rnn", "lstm"} {
		m := inferModel(t, cell)
		seq := randomTokens(300, 9, 11)
		for _, n := range []int{1, 2, 65, 129, 300} {
			for _, sw := range [][2]int{{1, 0}, {3, 0}, {4, 9}} {
				if err := m.SetScoring(sw[0], sw[1]); err != nil {
					t.Fatal(err)
				}
				want := make([]float64, n)
				if err := m.LogProbs(ctx, want, seq[:n]); err != nil {
					t.Fatal(err)
				}
				r := &windowReader{ids: seq[:n]}
				got := make([]float64, n)
				seen, last := 0, -1
				err := m.LogProbsEach(ctx, r, func(pos int, lp float64) {
					if sw[0] == 1 && pos != last+1 {
						t.Fatalf("%s n=%d: position %d after %d", cell, n, pos, last)
					}
					last = pos
					got[pos] = lp
					seen++
				})
				if err != nil {
					t.Fatal(err)
				}
				if seen != n {
					t.Fatalf("%s n=%d streams=%v: %d positions visited", cell, n, sw, seen)
				}
				for i := range want {
					if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
						t.Fatalf("%s n=%d streams=%v: position %d: %v, LogProbs %v", cell, n, sw, i, got[i], want[i])
					}
				}
				if r.longest > scoreChunk+1 {
					t.Errorf("%s n=%d: a read of %d tokens, more than a pass (%d)", cell, n, r.longest, scoreChunk+1)
				}
			}
		}
	}
}
