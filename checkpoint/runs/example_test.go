package runs_test

import (
	"context"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"strings"

	"weft/checkpoint/runs"
	"weft/configs"
	"weft/rnn"
)

// Example trains a tiny character LSTM from a Go program on a corpus held
// in a string, then loads the best checkpoint back, scores a line and
// samples a continuation: what a service embedding weft does, with no
// command line involved. The corpus is an invented harbour log.
func Example() {
	ctx := context.Background()
	var corpus strings.Builder
	r := rand.New(rand.NewPCG(3, 4))
	ships := []string{"WREN", "ALVA", "SKERRY", "BRANWEN"}
	for i := 0; i < 400; i++ {
		fmt.Fprintf(&corpus, "%02d:%02d %s berth %d over\n", i/60%24, i%60, ships[r.IntN(len(ships))], 1+r.IntN(9))
	}

	dir, err := os.MkdirTemp("", "weft-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)

	// The run file, as a struct: defaults, then what this run changes.
	run := configs.Default()
	run.Data.Files = []string{"-"} // read the corpus from TrainOptions.Stdin
	run.Data.Tokenizer = "char"
	run.Model.HiddenSize, run.Model.EmbeddingSize = 32, 16
	run.Training.BatchSize, run.Training.UnrollSteps = 8, 32
	run.Training.LearningRate, run.Training.MaxSteps, run.Training.Threads = 0.01, 150, 1
	run.Evaluation.EverySteps = 50

	res, err := runs.Train(ctx, &run, dir, runs.TrainOptions{Stdin: strings.NewReader(corpus.String())})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("%s; best validation at step %d\n", res.Reason, res.BestStep)

	// Load the best checkpoint and score a line from a fresh state.
	m, err := runs.OpenModel(dir, "best")
	if err != nil {
		log.Fatal(err)
	}
	score := func(line string) float64 {
		seq := m.Vocab.Encode(nil, line)
		logp := make([]float64, len(seq))
		if err := m.Net.LogProbs(ctx, logp, seq); err != nil {
			log.Fatal(err)
		}
		var nats float64
		for _, lp := range logp {
			nats -= lp
		}
		return nats / math.Ln2 / float64(len([]rune(line)))
	}
	usual, odd := score("03:14 WREN berth 4 over\n"), score("03:14 over 4 berth WREN\n")
	fmt.Printf("a usual line costs fewer bits per character than a shuffled one: %v\n", usual < odd)

	// Sample a continuation of a prompt, seeded, up to the end of the line.
	s := m.Net.NewStream(1)
	if err := rnn.Prime(ctx, s, m.Vocab.Encode(nil, "03:14 ")); err != nil {
		log.Fatal(err)
	}
	sp, err := rnn.NewSampler(rnn.Sampling{Temperature: 0.5}, rand.New(rand.NewPCG(42, 0)))
	if err != nil {
		log.Fatal(err)
	}
	var ids []int
	if _, err := rnn.Generate(ctx, s, sp, 40, func(t rnn.Token) (bool, error) {
		ids = append(ids, t.ID)
		return m.Vocab.Decode(ids[len(ids)-1:]) == "\n", nil
	}); err != nil {
		log.Fatal(err)
	}
	sample := m.Vocab.Decode(ids)
	fmt.Printf("the sample ends its line: %v\n", strings.HasSuffix(sample, "\n"))
	// Output:
	// step budget reached (training.max_steps = 150); best validation at step 150
	// a usual line costs fewer bits per character than a shuffled one: true
	// the sample ends its line: true
}
