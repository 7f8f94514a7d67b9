package runs_test

import (
	"context"
	"fmt"
	"log"
	"math/rand/v2"
	"os"
	"strings"

	"weft/checkpoint/generate"
	"weft/checkpoint/runs"
	"weft/configs"
	"weft/eval/surprise"
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

	// Load the best checkpoint and score two lines, each from a fresh
	// state, as 'weft score' does.
	m, err := runs.OpenModel(dir, "best")
	if err != nil {
		log.Fatal(err)
	}
	var rows []surprise.Row
	sc, err := surprise.New(m.Net, "rnn", m.Vocab, surprise.Options{Unit: surprise.Line, MaxChars: 1 << 16},
		func(r surprise.Row) error { rows = append(rows, r); return nil })
	if err != nil {
		log.Fatal(err)
	}
	if _, err := sc.Score(ctx, strings.NewReader("03:14 WREN berth 4 over\n03:14 over 4 berth WREN\n"), "check"); err != nil {
		log.Fatal(err)
	}
	if err := sc.Flush(); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("a usual line costs fewer bits per character than a shuffled one: %v\n", rows[0].BitsPerChar < rows[1].BitsPerChar)

	// Continue a prompt, seeded, up to the end of the line, as 'weft
	// sample' does. Generated text can be wrong or offensive: review it.
	prompt := m.Vocab.Encode(nil, "03:14 ")
	o := generate.Options{Length: generate.Length{N: 40}, Samples: 1, Sampling: rnn.Sampling{Temperature: 0.5}, Seed: 42, Stop: []string{"\n"}}
	if err := generate.Continue(ctx, m, prompt, o, nil, func(_ int, c generate.Continuation) error {
		fmt.Printf("the continuation stops at the line end: %v\n", c.Stop == "stop_string")
		return nil
	}); err != nil {
		log.Fatal(err)
	}
	// Output:
	// step budget reached (training.max_steps = 150); best validation at step 150
	// a usual line costs fewer bits per character than a shuffled one: true
	// the continuation stops at the line end: true
}
