package configs

import (
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"weft/rnn"
)

// TestLSTMParams: the count matches what rnn.Model reports, and the counts
// the grid's runs printed (configs/testdata/fitgrid/table.tsv, "params").
func TestLSTMParams(t *testing.T) {
	tests := []struct {
		layers, h, e, v int
		want            int64
	}{
		{1, 256, 64, 84, 355668},  // table.tsv, lstm-1x256
		{1, 128, 64, 84, 115028},  // table.tsv, lstm-1x128
		{1, 512, 64, 84, 1230164}, // table.tsv, lstm-1x512
		{2, 256, 64, 84, 880980},  // table.tsv, lstm-2x256-d0.1
		{2, 32, 0, 20, 0},         // one-hot input: checked against rnn below only
	}
	for _, tt := range tests {
		got := LSTMParams(tt.layers, tt.h, tt.e, tt.v)
		if tt.want != 0 && got != tt.want {
			t.Errorf("LSTMParams(%d, %d, %d, %d) = %d, want %d", tt.layers, tt.h, tt.e, tt.v, got, tt.want)
		}
		c := rnn.DefaultConfig()
		c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize = "lstm", tt.layers, tt.h, tt.e
		m, err := rnn.NewModel[float32](c, tt.v, 1)
		if err != nil {
			t.Fatal(err)
		}
		if int64(m.NumParams()) != got {
			t.Errorf("LSTMParams(%d, %d, %d, %d) = %d, rnn.Model has %d", tt.layers, tt.h, tt.e, tt.v, got, m.NumParams())
		}
	}
}

// TestSize runs the sizing rule on a table of nights. The expected sizes
// are worked out by hand from the rule (Size's doc comment): the reference
// speed is 72,000 tokens/s per core for lstm 1×256 (355,668 parameters,
// 350,292 without the embedding), a model's speed that divided by
// 0.12 + 0.000164·V + 0.866224·P′/350,292 (P′: its parameters without the
// embedding; over 84 characters 1.919 for 1×384, 3.163 for 1×512, 8.354
// for 2×512, 18.30 for 2×768), and the budget is counted less the 10%
// plan margin.
func TestSize(t *testing.T) {
	const moby = 1071285 // Moby-Dick's training split, char tokenizer, default held-out fractions (as weft config new --fit counted it)
	tests := []struct {
		name    string
		in      FitInput
		layers  int
		hidden  int
		dropout float64
	}{
		// 54 s at 144,000 tokens/s for 1×256: 1×384 (727,380
		// parameters) at 75,032 tokens/s sees 4.05 M tokens, 5.6 per
		// parameter (≥ 4); 1×512 (1,230,164) at 45,533 tokens/s sees
		// 2.46 M, 2.0 per parameter: too few. 3.8 passes over the
		// corpus: dropout 0.1; under 8 M tokens: constant rate.
		{"moby 1m", FitInput{Budget: time.Minute, CorpusTokens: moby, VocabSize: 84, Tokenizer: "char", Cores: 2}, 1, 384, 0.1},
		// 540 s: 1×512 sees 24.6 M, 20 per parameter; 2×512 (3,329,364)
		// at 17,238 tokens/s sees 9.3 M, 2.8 per parameter: too few.
		// 23 passes: dropout 0.25.
		{"moby 10m", FitInput{Budget: 10 * time.Minute, CorpusTokens: moby, VocabSize: 84, Tokenizer: "char", Cores: 2}, 1, 512, 0.25},
		// 1620 s: 2×512 sees 27.9 M, 8.4 per parameter, and has 3.1
		// parameters per corpus token (≤ 4); 2×768 (7,350,612) at 7,870
		// tokens/s sees 12.7 M, 1.7 per parameter: too few. 26 passes:
		// dropout 0.25.
		{"moby 30m", FitInput{Budget: 30 * time.Minute, CorpusTokens: moby, VocabSize: 84, Tokenizer: "char", Cores: 2}, 2, 512, 0.25},
		// 25,920 s: 2×512 sees 447 M, 134 per parameter; 2×768 would
		// have 6.9 parameters per corpus token: over the cap.
		{"moby 8h", FitInput{Budget: 8 * time.Hour, CorpusTokens: moby, VocabSize: 84, Tokenizer: "char", Cores: 2}, 2, 512, 0.25},
		// The 10-minute night measured at 60,000 tokens/s, well under
		// the estimate: 1×512 sees 10.3 M, 8.3 per parameter; 2×512
		// 3.9 M, 1.2 per parameter. 9.6 passes: dropout 0.1.
		{"moby 10m slow", FitInput{Budget: 10 * time.Minute, CorpusTokens: moby, VocabSize: 84, Tokenizer: "char", Cores: 2, TokensPerSecond: 60000}, 1, 512, 0.1},
		// A 10,000-token corpus allows 40,000 parameters: below the
		// smallest size, which is taken anyway; thousands of passes.
		{"tiny corpus 8h", FitInput{Budget: 8 * time.Hour, CorpusTokens: 10000, VocabSize: 40, Tokenizer: "char", Cores: 4}, 1, 128, 0.25},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f, err := Size(tt.in)
			if err != nil {
				t.Fatal(err)
			}
			if f.Layers != tt.layers || f.Hidden != tt.hidden || f.Dropout != tt.dropout {
				t.Errorf("got lstm %d×%d dropout %g, want %d×%d dropout %g", f.Layers, f.Hidden, f.Dropout, tt.layers, tt.hidden, tt.dropout)
			}
			// Annealing from 8 M expected tokens (annealTokens); the 1-minute
			// night expects 4.05 M.
			wantSched := "cosine"
			if f.ExpectedTokens < 8000000 {
				wantSched = "constant"
			}
			if f.Schedule != wantSched || f.Unroll != 64 || f.Batch != 32 || f.LearningRate != 0.004 || f.MinRate >= f.LearningRate {
				t.Errorf("schedule %q, unroll %d, batch %d, rates %g→%g; want %s, 64, 32, 0.004 decaying", f.Schedule, f.Unroll, f.Batch, f.LearningRate, f.MinRate, wantSched)
			}
			if tt.name == "moby 1m" && f.Schedule != "constant" || tt.name == "moby 10m" && f.Schedule != "cosine" {
				t.Errorf("%s: schedule %q (%d expected tokens)", tt.name, f.Schedule, f.ExpectedTokens)
			}
			// The printed figures agree with each other.
			if want := float64(f.ExpectedTokens) / float64(tt.in.CorpusTokens); f.Epochs != want {
				t.Errorf("epochs %v, want %v", f.Epochs, want)
			}
			for _, k := range []string{"model.layers", "model.dropout", "training.schedule", "training.unroll_steps", "training.batch_size"} {
				if f.Why[k] == "" {
					t.Errorf("no reason for %s", k)
				}
			}
			// The run file it writes loads strictly, with the values
			// chosen and a comment on each.
			text := f.RunFile([]string{"/corpus/book.txt"}, "char", tt.in.Budget)
			r, err := Parse("fit.toml", []byte(text), nil)
			if err != nil {
				t.Fatalf("the written run file does not load: %v\n%s", err, text)
			}
			if r.Model.Layers != f.Layers || r.Model.HiddenSize != f.Hidden || r.Model.Dropout != f.Dropout || r.Training.Schedule != f.Schedule || r.Training.LearningRate != f.LearningRate || r.Training.MaxSteps != 0 {
				t.Errorf("run file loads as %+v / %+v", r.Model, r.Training.TrainConfig)
			}
			for _, key := range []string{"layers = ", "dropout = ", "unroll_steps = ", "batch_size = ", "schedule = ", "learning_rate = "} {
				i := strings.Index(text, key)
				if i < 0 || !strings.Contains(strings.SplitN(text[i:], "\n", 2)[0], "  # ") {
					t.Errorf("%q has no reason in a comment:\n%s", key, text)
				}
			}
		})
	}
}

func TestSizeWord(t *testing.T) {
	f, err := Size(FitInput{Budget: 30 * time.Minute, CorpusTokens: 2000000, VocabSize: 10000, Tokenizer: "word", Cores: 2})
	if err != nil {
		t.Fatal(err)
	}
	// Words: the presets' unroll and embedding.
	if f.Unroll != 35 || f.Embedding != 128 {
		t.Errorf("word: unroll %d, embedding %d; want 35, 128", f.Unroll, f.Embedding)
	}
	// A larger budget never picks a smaller model (the rule is monotone).
	g, _ := Size(FitInput{Budget: 8 * time.Hour, CorpusTokens: 2000000, VocabSize: 10000, Tokenizer: "word", Cores: 2})
	if g.Params < f.Params {
		t.Errorf("8 h picks %d parameters, 30 min %d", g.Params, f.Params)
	}
}

func TestSizeRefuses(t *testing.T) {
	ok := FitInput{Budget: time.Hour, CorpusTokens: 1000, VocabSize: 50, Cores: 1}
	for name, set := range map[string]func(*FitInput){
		"budget":            func(in *FitInput) { in.Budget = 0 },
		"corpus":            func(in *FitInput) { in.CorpusTokens = 0 },
		"cores":             func(in *FitInput) { in.Cores = 0 },
		"vocab":             func(in *FitInput) { in.VocabSize = 1 },
		"tokens per second": func(in *FitInput) { in.TokensPerSecond = -1 },
	} {
		in := ok
		set(&in)
		if _, err := Size(in); err == nil || !strings.Contains(err.Error(), name) {
			t.Errorf("%s out of range: got %v, want an error naming it", name, err)
		}
	}
}

// TestCheckProportion: under one pass over the corpus, and many passes by
// a model far below the size the corpus allows, warn with the numbers;
// a sound plan does not.
func TestCheckProportion(t *testing.T) {
	tests := []struct {
		name                  string
		expect, train, params int64
		want                  string
	}{
		{"under one pass", 400000, 1000000, 3000000, "0.40 of one pass"},
		{"many passes, small model", 100000000, 1000000, 100000, "about 100 times"},
		{"many passes, model at the cap", 100000000, 1000000, 3500000, ""},
		{"sound", 10000000, 1000000, 700000, ""},
	}
	for _, tt := range tests {
		w := strings.Join(CheckProportion(tt.expect, tt.train, tt.params, time.Hour), "\n")
		if (tt.want == "") != (w == "") || !strings.Contains(w, tt.want) {
			t.Errorf("%s: got %q, want %q", tt.name, w, tt.want)
		}
	}
}

// TestCostShareMatchesSpeeds: the speed model, scaled from the measured
// 1×256, is within 15% of every
// one-thread speed in fitgrid/speeds.tsv, the measurements it was fitted
// to (weft bench on an idle machine, speeds.sh).
func TestCostShareMatchesSpeeds(t *testing.T) {
	b, err := os.ReadFile("testdata/fitgrid/speeds.tsv")
	if err != nil {
		t.Fatal(err)
	}
	var ref float64
	type row struct {
		name            string
		layers, h, e, v int
		tps             float64
	}
	var rows []row
	for _, line := range strings.Split(string(b), "\n") {
		f := strings.Split(line, "\t")
		if len(f) != 7 || f[4] != "1" || strings.HasPrefix(f[0], "#") || f[0] == "vocab" {
			continue
		}
		var r row
		r.name = f[3]
		if _, err := fmt.Sscanf(f[3], "lstm-%dx%d", &r.layers, &r.h); err != nil {
			t.Fatalf("%q: %v", line, err)
		}
		r.v, _ = strconv.Atoi(f[0])
		r.e, _ = strconv.Atoi(f[1])
		r.tps, _ = strconv.ParseFloat(f[6], 64)
		if params, _ := strconv.ParseInt(f[5], 10, 64); params != LSTMParams(r.layers, r.h, r.e, r.v) {
			t.Errorf("%s over %d: speeds.tsv has %d parameters, LSTMParams %d", r.name, r.v, params, LSTMParams(r.layers, r.h, r.e, r.v))
		}
		if r.name == "lstm-1x256" && r.v == 84 {
			ref = r.tps
		}
		rows = append(rows, r)
	}
	if ref == 0 || len(rows) < 8 {
		t.Fatalf("speeds.tsv: %d one-thread rows, reference speed %v", len(rows), ref)
	}
	for _, r := range rows {
		pred := ref / costShare(r.layers, r.h, r.e, r.v)
		if d := math.Abs(pred/r.tps - 1); d > 0.15 {
			t.Errorf("%s over %d: predicted %.0f tokens/s, measured %.0f (%.0f%% off)", r.name, r.v, pred, r.tps, 100*d)
		}
	}
}
