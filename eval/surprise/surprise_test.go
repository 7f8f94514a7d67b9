package surprise

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"

	"weft/checkpoint/modeltest"
	"weft/data"
	"weft/eval"
	"weft/rnn"
)

const corpus = "the dog met a cat on the log.\nthe mat sat.\na cat sat on the mat.\n"

func model(t testing.TB) (*rnn.Model[float32], *data.Vocab) {
	m := modeltest.New(t, corpus, "char", "line")
	return m.Net, m.Vocab
}

// direct is the total of eval.NewResult over the model's LogProbs of seq
// from a fresh state: how 'weft eval' totals a split.
func direct(t testing.TB, lm eval.LanguageModel, seq []int, chars int) eval.Result {
	t.Helper()
	lp := make([]float64, len(seq))
	if err := lm.LogProbs(context.Background(), lp, seq); err != nil {
		t.Fatal(err)
	}
	return eval.NewResult(lm.Name(), "", "", lp, chars)
}

func scoreAll(t testing.TB, lm eval.LanguageModel, v *data.Vocab, o Options, text string) []Row {
	t.Helper()
	var rows []Row
	s, err := New(lm, "rnn", v, o, func(r Row) error { rows = append(rows, r); return nil })
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.Score(context.Background(), strings.NewReader(text), "in"); err != nil {
		t.Fatal(err)
	}
	if err := s.Flush(); err != nil {
		t.Fatal(err)
	}
	return rows
}

// TestLinesMatchEval: each line's bits are exactly (not merely closely)
// what eval gives the line alone, since both go through the same LogProbs
// call and the same eval.NewResult sum; a second implementation would show
// here.
func TestLinesMatchEval(t *testing.T) {
	net, v := model(t)
	lines := []string{"a cat sat.\n", "the dog met the log.\n", "on a mat"}
	rows := scoreAll(t, net, v, Options{Unit: Line, MaxChars: 1 << 20}, strings.Join(lines, ""))
	if len(rows) != 3 {
		t.Fatalf("got %d rows, want 3", len(rows))
	}
	for i, l := range lines {
		want := direct(t, net, v.Encode(nil, l), len(l))
		if rows[i].Line != i+1 || rows[i].Bits != want.CrossEntropyBits || rows[i].Characters != len(l) || rows[i].Text != strings.TrimSuffix(l, "\n") || rows[i].Seq != i {
			t.Errorf("line %d: got %+v, want %v bits", i+1, rows[i], want.CrossEntropyBits)
		}
	}
	// The most surprising token of line 2 is the one LogProbs gives the
	// lowest probability.
	seq := v.Encode(nil, lines[1])
	lp := make([]float64, len(seq))
	if err := net.LogProbs(context.Background(), lp, seq); err != nil {
		t.Fatal(err)
	}
	worst := 0
	for i := range lp {
		if lp[i] < lp[worst] {
			worst = i
		}
	}
	if rows[1].SurpriseOffset != worst || rows[1].SurpriseBits != -lp[worst]/math.Ln2 {
		t.Errorf("surprise at %d (%v bits), want %d (%v)", rows[1].SurpriseOffset, rows[1].SurpriseBits, worst, -lp[worst]/math.Ln2)
	}
}

// TestPiecesAndContext: a unit cut into pieces of MaxChars characters is
// the sum of its pieces scored alone; with Context the pieces are scored
// after the preceding tokens, which equals scoring the concatenation and
// keeping the piece's part.
func TestPiecesAndContext(t *testing.T) {
	net, v := model(t)
	text := "the dog met a cat on the log."
	rows := scoreAll(t, net, v, Options{Unit: Document, MaxChars: 10}, text)
	var want float64
	for i := 0; i < len(text); i += 10 {
		p := text[i:min(i+10, len(text))]
		want += direct(t, net, v.Encode(nil, p), len(p)).CrossEntropyNats
	}
	// The document unit adds no boundary token here: this vocabulary's
	// boundary is the line end.
	if len(rows) != 1 || rows[0].Pieces != 3 || rows[0].Bits != want/math.Ln2 {
		t.Errorf("pieces: got %+v, want 3 pieces and %v bits", rows, want/math.Ln2)
	}
	two := "a cat sat.\nthe mat sat.\n"
	rows = scoreAll(t, net, v, Options{Unit: Line, MaxChars: 1 << 20, Context: 1000}, two)
	seq := v.Encode(nil, two)
	lp := make([]float64, len(seq))
	if err := net.LogProbs(context.Background(), lp, seq); err != nil {
		t.Fatal(err)
	}
	n1 := len(v.Encode(nil, "a cat sat.\n"))
	second := eval.NewResult("", "", "", lp[n1:], len(two)-n1)
	if len(rows) != 2 || rows[1].Bits != second.CrossEntropyBits {
		t.Errorf("context: got %+v, want the second line at %v bits", rows, second.CrossEntropyBits)
	}
}

// TestWorkersInvariant: the rows are identical for 1 and 3 workers.
func TestWorkersInvariant(t *testing.T) {
	net, v := model(t)
	text := strings.Repeat(corpus, 5)
	one := scoreAll(t, net, v, Options{Unit: Line, MaxChars: 7, Context: 5}, text)
	three := scoreAll(t, net, v, Options{Unit: Line, MaxChars: 7, Context: 5, Workers: 3}, text)
	if !reflect.DeepEqual(one, three) || len(one) != 15 {
		t.Errorf("1 worker gave %d rows, 3 gave %d, or they differ", len(one), len(three))
	}
}

func TestWindows(t *testing.T) {
	net, v := model(t)
	rows := scoreAll(t, net, v, Options{Unit: Window, Window: 8, MaxChars: 1 << 20}, "the dog met a cat.\n")
	// 19 tokens: windows of 8, 8 and 3, starting on line 1.
	if len(rows) != 3 || rows[0].Tokens != 8 || rows[2].Tokens != 3 || rows[2].Line != 1 {
		t.Errorf("got %+v", rows)
	}
}

func TestOptionErrors(t *testing.T) {
	net, v := model(t)
	for _, o := range []Options{{Unit: "page", MaxChars: 1}, {Unit: Window, MaxChars: 1}, {Unit: Line, Window: 3, MaxChars: 1}, {Unit: Line}, {Unit: Line, MaxChars: 1, Context: -1}} {
		if _, err := New(net, "rnn", v, o, nil); err == nil {
			t.Errorf("%+v: no error", o)
		}
	}
	nolines, err := data.LearnVocab(context.Background(), strings.NewReader("abc"), "x", data.VocabOptions{Tokenizer: "char"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := New(net, "rnn", nolines, Options{Unit: Line, MaxChars: 1}, nil); err != ErrNoLineEnd {
		t.Errorf("got %v, want ErrNoLineEnd", err)
	}
}

// TestRanking: a limited ranking keeps the same rows, in the same order, as
// the first rows of a full one (the most surprising first; ties by order).
func TestRanking(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	all, top := NewRanking(0), NewRanking(5)
	for i := 0; i < 200; i++ {
		row := Row{BitsPerChar: float64(r.IntN(20)), Seq: i}
		all.Add(row)
		top.Add(row)
	}
	a, b := all.Rows(), top.Rows()
	if len(a) != 200 || !reflect.DeepEqual(a[:5], b) {
		t.Errorf("top 5 %v, first 5 of all %v", b, a[:5])
	}
	for i := 1; i < len(a); i++ {
		if a[i].BitsPerChar > a[i-1].BitsPerChar || (a[i].BitsPerChar == a[i-1].BitsPerChar && a[i].Seq < a[i-1].Seq) {
			t.Fatalf("rows %d and %d out of order: %v %v", i-1, i, a[i-1], a[i])
		}
	}
}

var sinkRow Row

// BenchmarkScore measures scoring throughput (characters/s) of the
// reference LSTM (vocabulary 96, embedding 64, one layer of 256): 80-
// character lines each from a fresh state, or one document with its state
// carried through.
func BenchmarkScore(b *testing.B) {
	var chars strings.Builder
	for c := ' ' + 1; c < '~'; c++ { // 93 printable characters, space, unknown, line end: 96
		chars.WriteRune(c)
	}
	chars.WriteString(" \n")
	v, err := data.LearnVocab(context.Background(), strings.NewReader(chars.String()), "ascii", data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		b.Fatal(err)
	}
	if v.Len() != 96 {
		b.Fatalf("vocabulary of %d entries, want 96", v.Len())
	}
	cfg := rnn.DefaultConfig()
	cfg.HiddenSize, cfg.EmbeddingSize, cfg.Layers = 256, 64, 1
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	const lineChars, lines = 80, 64
	var text strings.Builder
	for i := 0; i < lines; i++ {
		for j := 0; j < lineChars-1; j++ {
			text.WriteByte(byte('!' + rng.IntN(93)))
		}
		text.WriteByte('\n')
	}
	for _, tc := range []struct {
		unit    string
		workers int
	}{{Line, 1}, {Line, 2}, {Document, 1}} {
		b.Run(fmt.Sprintf("lstm/vocab=96/embed=64/hidden=256/unit=%s/threads=%d", tc.unit, tc.workers), func(b *testing.B) {
			s, err := New(net, "rnn", v, Options{Unit: tc.unit, MaxChars: 1 << 20, Workers: tc.workers}, func(r Row) error { sinkRow = r; return nil })
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if _, err := s.Score(context.Background(), strings.NewReader(text.String()), "bench"); err != nil {
					b.Fatal(err)
				}
				if err := s.Flush(); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.N*text.Len())/b.Elapsed().Seconds(), "chars/s")
		})
	}
}

// TestLineTextAsRead: issue 12, a line's text is the line as it was read,
// characters outside the vocabulary included (they were rebuilt from tokens
// and printed as U+FFFD), and a long line is cut at TextLimit characters.
func TestLineTextAsRead(t *testing.T) {
	net, v := model(t)
	long := strings.Repeat("ž", TextLimit+10)
	lines := []string{"zzzz qqq 123", "the cat", long, "no line end"}
	rows := scoreAll(t, net, v, Options{Unit: Line, MaxChars: 5}, strings.Join(lines, "\n"))
	if len(rows) != 4 {
		t.Fatalf("got %d rows, want 4", len(rows))
	}
	want := []string{lines[0], lines[1], strings.Repeat("ž", TextLimit) + "…", lines[3]}
	for i, r := range rows {
		if r.Text != want[i] {
			t.Errorf("line %d: text %q, want %q", i+1, r.Text, want[i])
		}
	}
}
