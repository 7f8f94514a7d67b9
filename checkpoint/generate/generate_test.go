package generate

import (
	"context"
	"math"
	"reflect"
	"strings"
	"testing"

	"weft/checkpoint"
	"weft/checkpoint/modeltest"
	"weft/rnn"
)

const corpus = "the dog met a cat on the log.\nthe mat sat.\na cat sat on the mat.\n"

func model(t testing.TB) *checkpoint.Model { return modeltest.New(t, corpus, "char", "line") }

func run(t *testing.T, m *checkpoint.Model, prompt string, o Options) ([]Continuation, string) {
	t.Helper()
	var got []Continuation
	var streamed strings.Builder
	err := Continue(context.Background(), m, m.Vocab.Encode(nil, prompt), o, func(_ int, s string) error {
		streamed.WriteString(s)
		return nil
	}, func(i int, c Continuation) error {
		if i != len(got)+1 {
			t.Fatalf("continuation %d after %d", i, len(got))
		}
		got = append(got, c)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return got, streamed.String()
}

// TestSeeded: the same seed gives the same continuations; the tokens spell
// the text; the streamed text is the texts joined; the log-probability is
// the sum of the tokens'.
func TestSeeded(t *testing.T) {
	m := model(t)
	o := Options{Length: Length{N: 40}, Samples: 3, Sampling: rnn.Sampling{Temperature: 1}, Seed: 9}
	a, streamed := run(t, m, "the ", o)
	b, _ := run(t, m, "the ", o)
	if !reflect.DeepEqual(a, b) || len(a) != 3 {
		t.Fatalf("two runs with seed 9 differ, or gave %d continuations", len(a))
	}
	if a[0].Text == a[1].Text && a[1].Text == a[2].Text {
		t.Errorf("three draws gave the same text %q", a[0].Text)
	}
	joined := ""
	for _, c := range a {
		spelt, sum := "", 0.0
		for _, tk := range c.Tokens {
			spelt += tk.Text
			sum += tk.LogProb
		}
		if spelt != c.Text || math.Abs(sum-c.LogProb) > 1e-12 || len(c.Tokens) > 40 {
			t.Errorf("text %q, tokens spell %q; log-probability %v, sum %v", c.Text, spelt, c.LogProb, sum)
		}
		if (c.Stop == "boundary") != (c.Tokens[len(c.Tokens)-1].ID == m.Vocab.Boundary()) {
			t.Errorf("stop %q with last token %d", c.Stop, c.Tokens[len(c.Tokens)-1].ID)
		}
		joined += c.Text
	}
	if streamed != joined {
		t.Errorf("streamed %q, want %q", streamed, joined)
	}
}

// TestStopAndLength: a stop text cuts the continuation before it; a length
// in characters ends it at that many characters at most.
func TestStopAndLength(t *testing.T) {
	m := model(t)
	cs, _ := run(t, m, "", Options{Length: Length{N: 300}, Samples: 4, Sampling: rnn.Sampling{Temperature: 1}, Seed: 3, Stop: []string{"t "}})
	stopped := 0
	for _, c := range cs {
		if strings.Contains(c.Text, "t ") {
			t.Errorf("text %q holds the stop text", c.Text)
		}
		if c.Stop == "stop_string" {
			stopped++
		}
	}
	if stopped == 0 {
		t.Errorf("no continuation of 4 reached the stop text \"t \"")
	}
	cs, _ = run(t, m, "", Options{Length: Length{N: 5, Chars: true}, Samples: 2, Sampling: rnn.Sampling{Temperature: 1}, Seed: 3})
	for _, c := range cs {
		if n := len([]rune(c.Text)); n > 5 || (c.Stop == "length" && n != 5) {
			t.Errorf("%q: %d characters, stop %q; want 5 at most", c.Text, n, c.Stop)
		}
	}
}

// TestBeam: a beam search's continuations are those of rnn.BeamSearch,
// best first.
func TestBeam(t *testing.T) {
	m := model(t)
	prompt := m.Vocab.Encode(nil, "a ")
	cs, streamed := run(t, m, "a ", Options{Length: Length{N: 12}, Samples: 3, Beam: 4})
	hyps, err := rnn.BeamSearch(context.Background(), m.Net, prompt, rnn.BeamConfig{Width: 4, MaxTokens: 12, End: m.Vocab.Boundary()})
	if err != nil {
		t.Fatal(err)
	}
	if len(cs) != 3 || streamed != "" {
		t.Fatalf("got %d continuations, streamed %q", len(cs), streamed)
	}
	for i, c := range cs {
		if c.LogProb != hyps[i].LogProb || (i > 0 && c.LogProb > cs[i-1].LogProb) {
			t.Errorf("continuation %d: %v nats, beam search %v", i, c.LogProb, hyps[i].LogProb)
		}
	}
}

func TestOptionErrors(t *testing.T) {
	ok := Options{Length: Length{N: 5}, Samples: 1, Sampling: rnn.Sampling{Temperature: 1}}
	for _, o := range []Options{
		{Samples: 1},
		{Length: Length{N: 5}},
		{Length: Length{N: 5}, Samples: 3, Beam: 2},
		{Length: Length{N: 5}, Samples: 1, Beam: -1},
		{Length: Length{N: 5}, Samples: 1, Stop: []string{""}},
		{Length: Length{N: 5}, Samples: 1, Sampling: rnn.Sampling{Temperature: -1}},
	} {
		if o.Validate() == nil {
			t.Errorf("%+v: no error", o)
		}
	}
	if err := ok.Validate(); err != nil {
		t.Error(err)
	}
	for s, want := range map[string]Length{"200": {N: 200}, "30c": {N: 30, Chars: true}} {
		if got, err := ParseLength(s); err != nil || got != want {
			t.Errorf("%q: got %+v, %v", s, got, err)
		}
	}
	for _, s := range []string{"", "0", "-3", "c", "12x"} {
		if _, err := ParseLength(s); err == nil {
			t.Errorf("%q: no error", s)
		}
	}
}
