package data

import (
	"bytes"
	"context"
	"os"
	"testing"

	"weft/data/corpustest"
)

var benchSink int

// BenchmarkTokenize measures encoding throughput on the Moby-Dick text,
// through the whole streaming path (normalizer, tokenizer, vocabulary
// lookup), with a vocabulary learned from the text beforehand. Targets of
// the foundation issue: 50 MB/s for char, 20 MB/s for word, on one core.
func BenchmarkTokenize(b *testing.B) {
	raw, err := os.ReadFile(corpustest.MobyDick(b))
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	for _, tk := range allTokenizers {
		b.Run("tokenizer="+tk, func(b *testing.B) {
			v, err := LearnVocab(ctx, bytes.NewReader(raw), "moby-dick", VocabOptions{Tokenizer: tk, BPEMerges: 1000})
			if err != nil {
				b.Fatal(err)
			}
			ids := make([]int, 0, len(raw))
			b.SetBytes(int64(len(raw)))
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				ids = ids[:0]
				err := v.EncodeReader(ctx, bytes.NewReader(raw), "moby-dick", func(id, _ int) { ids = append(ids, id) })
				if err != nil {
					b.Fatal(err)
				}
			}
			benchSink = len(ids)
		})
	}
}

// BenchmarkLearnVocab measures counting and, for bpe, learning 1000 merges
// on the Moby-Dick text.
func BenchmarkLearnVocab(b *testing.B) {
	raw, err := os.ReadFile(corpustest.MobyDick(b))
	if err != nil {
		b.Fatal(err)
	}
	for _, tk := range []string{"char", "word", "bpe"} {
		b.Run("tokenizer="+tk, func(b *testing.B) {
			b.SetBytes(int64(len(raw)))
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				v, err := LearnVocab(context.Background(), bytes.NewReader(raw), "moby-dick", VocabOptions{Tokenizer: tk, BPEMerges: 1000})
				if err != nil {
					b.Fatal(err)
				}
				benchSink = v.Len()
			}
		})
	}
}
