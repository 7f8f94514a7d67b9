package data_test

import (
	"context"
	"fmt"
	"io"
	"strings"

	"weft/data"
)

func ExampleVocab() {
	text := "the cat saw the hat\n"
	v, err := data.LearnVocab(context.Background(), strings.NewReader(text), "example", data.VocabOptions{Tokenizer: "word"})
	if err != nil {
		fmt.Println(err)
		return
	}
	// Ids by training count, ties by bytes: " " (4) is 1, "the" (2) is 2,
	// then "\n", "cat", "hat", "saw" (1 each) are 3 to 6; "bat" is unknown.
	ids := v.Encode(nil, "the bat saw the cat\n")
	fmt.Println(ids)
	fmt.Printf("%+q\n", v.Decode(ids))
	// Output:
	// [2 1 0 1 6 1 2 1 4 3]
	// "the \ufffd saw the cat\n"
}

func ExampleBatches() {
	tokens := []int{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12}
	b, err := data.NewBatches(data.NewTokens(tokens), data.BatchOptions{Streams: 2, Steps: 3})
	if err != nil {
		fmt.Println(err)
		return
	}
	for {
		w, err := b.Next(context.Background())
		if err == io.EOF {
			fmt.Println("end of epoch", b.Epoch())
			break
		}
		fmt.Println(w.T, w.Inputs, w.Targets)
	}
	// Output:
	// 3 [0 6 1 7 2 8] [1 7 2 8 3 9]
	// 3 [3 9 4 10 5 11] [4 10 5 11 6 12]
	// end of epoch 1
}
