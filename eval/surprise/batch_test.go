package surprise

import (
	"context"
	"fmt"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"

	"weft/data"
	"weft/eval"
	"weft/rnn"
)

// oneAtATime hides a model's LogProbsBatch, so that a Scorer scores each
// piece with its own LogProbs call, as before batching.
type oneAtATime struct{ eval.LanguageModel }

// TestBatchedRowsIdentical: with the model scoring BatchPieces pieces per
// call, every row (every field, every bit) is the one scoring each piece
// alone gives, for every unit, with and without context and pieces, with
// one worker and with three, over more pieces than one batch holds.
func TestBatchedRowsIdentical(t *testing.T) {
	net, v := model(t)
	if _, ok := any(net).(BatchModel); !ok {
		t.Fatal("rnn.Model is not a BatchModel")
	}
	text := strings.Repeat(corpus, 2*BatchPieces/3+1) // 3 lines each: more than two batches
	for _, o := range []Options{
		{Unit: Line, MaxChars: 1 << 20},
		{Unit: Line, MaxChars: 7, Context: 5},
		{Unit: Line, MaxChars: 1 << 20, Context: 1000},
		{Unit: Document, MaxChars: 13},
		{Unit: Window, Window: 9, MaxChars: 1 << 20, Context: 4},
	} {
		for _, workers := range []int{1, 3} {
			o.Workers = workers
			t.Run(fmt.Sprintf("%+v", o), func(t *testing.T) {
				want := scoreAll(t, oneAtATime{net}, v, o, text)
				got := scoreAll(t, net, v, o, text)
				if len(want) == 0 || !reflect.DeepEqual(got, want) {
					t.Fatalf("batched gave %d rows, one at a time %d, or they differ", len(got), len(want))
				}
			})
		}
	}
}

// TestLineRow: LineRow gives the row a line Scorer gives the same line.
func TestLineRow(t *testing.T) {
	net, v := model(t)
	for i, line := range []string{"a cat sat.", "the dog met the log on a mat", "zq"} {
		want := scoreAll(t, net, v, Options{Unit: Line, MaxChars: 1 << 20}, line+"\n")
		var toks, chars []int
		if err := v.EncodeReader(context.Background(), strings.NewReader(line+"\n"), "x", func(id, c int) {
			toks, chars = append(toks, id), append(chars, c)
		}); err != nil {
			t.Fatal(err)
		}
		lp := make([]float64, len(toks))
		if err := net.LogProbs(context.Background(), lp, toks); err != nil {
			t.Fatal(err)
		}
		got := LineRow(net.Name(), "rnn", v, toks, chars, lp, strings.TrimSuffix(line, "\n"), "in", 1)
		if len(want) != 1 || !reflect.DeepEqual(got, want[0]) {
			t.Errorf("line %d: got %+v, want %+v", i, got, want)
		}
	}
}

// BenchmarkScoreBatched compares, side by side, lines scored BatchPieces
// at a time (the default for a recurrent model) with the same lines scored
// one LogProbs call each: characters per second of 80-character lines
// with the reference LSTM of BenchmarkScore.
func BenchmarkScoreBatched(b *testing.B) {
	net, v, text := benchModel(b)
	for _, workers := range []int{1, 2} {
		for _, mode := range []string{"one", "batch"} {
			b.Run(fmt.Sprintf("lstm/vocab=96/embed=64/hidden=256/unit=line/threads=%d/%s", workers, mode), func(b *testing.B) {
				var lm eval.LanguageModel = net
				if mode == "one" {
					lm = oneAtATime{net}
				}
				s, err := New(lm, "rnn", v, Options{Unit: Line, MaxChars: 1 << 20, Workers: workers}, func(r Row) error { sinkRow = r; return nil })
				if err != nil {
					b.Fatal(err)
				}
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					if _, err := s.Score(context.Background(), strings.NewReader(text), "bench"); err != nil {
						b.Fatal(err)
					}
					if err := s.Flush(); err != nil {
						b.Fatal(err)
					}
				}
				b.ReportMetric(float64(b.N*len(text))/b.Elapsed().Seconds(), "chars/s")
			})
		}
	}
}

// benchModel is BenchmarkScore's reference LSTM (vocabulary 96, embedding
// 64, one layer of 256) with 256 random printable lines of 80 characters.
func benchModel(b *testing.B) (*rnn.Model[float32], *data.Vocab, string) {
	var chars strings.Builder
	for c := ' ' + 1; c < '~'; c++ { // 93 printable characters, space, unknown, line end: 96
		chars.WriteRune(c)
	}
	chars.WriteString(" \n")
	v, err := data.LearnVocab(context.Background(), strings.NewReader(chars.String()), "ascii", data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		b.Fatal(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.HiddenSize, cfg.EmbeddingSize, cfg.Layers = 256, 64, 1
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	var text strings.Builder
	for i := 0; i < 256; i++ {
		for j := 0; j < 79; j++ {
			text.WriteByte(byte('!' + rng.IntN(93)))
		}
		text.WriteByte('\n')
	}
	return net, v, text.String()
}
