package eval_test

import (
	"context"
	"fmt"

	"weft/eval"
)

// A uniform model over V symbols has perplexity exactly V; an n-gram model
// fitted on a repetitive text does far better. By hand, the held-out
// "cabcab" starts a document: P(c|<s>) = (0+1)/(1+3), then P(a|c) =
// P(c|b) = (6+1)/(6+3) three times and P(b|a) = (7+1)/(7+3) twice, for
// 2 + 3·0.3626 + 2·0.3219 = 3.732 bits over 6 characters.
func ExampleNewResult() {
	text := "abcabcabcabcabcabcabcabcab"
	seq := make([]int, len(text))
	for i, r := range text {
		seq[i] = int(r - 'a')
	}
	train, test := seq[:20], seq[20:]

	u := eval.Uniform{V: 3}
	r, _, _ := eval.Score(context.Background(), u, "test", test, len(test))
	fmt.Printf("%s: perplexity %.3f, %.3f bits/char\n", r.Model, r.Perplexity, r.BitsPerChar)

	c, _ := eval.CountNGrams(train, 3, 2, eval.NoBoundary, nil)
	m, _ := eval.NewNGram(c, 2, eval.Smoothing{Method: eval.AddK, K: 1})
	r, _, _ = eval.Score(context.Background(), m, "test", test, len(test))
	fmt.Printf("%s: perplexity %.3f, %.3f bits/char\n", r.Model, r.Perplexity, r.BitsPerChar)
	// Output:
	// uniform: perplexity 3.000, 1.585 bits/char
	// 2-gram add_k(1): perplexity 1.539, 0.622 bits/char
}
