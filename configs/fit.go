package configs

import (
	"context"
	"fmt"
	"math"
	"strings"
	"time"

	"weft/rnn/bench"
)

// The sizing rule: which LSTM to train in a time budget on a corpus and a
// machine. Its constants come from measurements on the corpora the tests
// fetch, in configs/testdata/fitgrid (the script grid.sh and the table it
// printed, with date, commit and load), unless marked otherwise.
const (
	// refTokensPerCore is the training speed of the reference model
	// (lstm 1×256, embedding 64, 84 characters: 355,668 parameters), in
	// tokens per second per core, used only when the speed was not
	// measured: 72,162 tokens/s measured on one thread of an idle machine
	// (fitgrid/speeds.tsv; 146,070 on two).
	refTokensPerCore = 72000
	// refParams is the parameter count of the reference model: lstm
	// refLayers×refHidden, embedding refEmbedding, over refVocab entries
	// (the characters of Moby-Dick; the grid's and speeds.tsv's first
	// model).
	refParams                          = 355668
	refLayers, refHidden, refEmbedding = 1, 256, 64
	refVocab                           = 84
	// fixedCostShare and vocabCostShare are the parts of the reference
	// model's time per token that do not grow with the parameters (see
	// costShare): a fixed part, and a part per output entry.
	fixedCostShare = 0.12
	vocabCostShare = 0.000164

	// minTokensPerParam: the largest model of the ladder is taken that
	// still trains on at least this many tokens per parameter in the
	// budget. In the grid (table.tsv), compared at about equal wall time,
	// the smaller model won both times: at about 30 s, lstm 1×128 after
	// 3 M tokens (26 tokens per parameter) beat 1×256 after 1 M (2.8);
	// at about 80 s, 1×256 after 3 M (8.4) beat 1×512 after 1 M (0.8).
	// The winners had 8.4 or more tokens per parameter, the losers 2.8
	// or fewer; 4 lies between.
	minTokensPerParam = 4
	// maxParamsPerCorpusToken caps the model at this many parameters per
	// training token of the corpus, whatever the budget: from memory,
	// character models of a few million parameters trained with heavy
	// dropout on about a megabyte of text are common practice; not
	// measured here.
	maxParamsPerCorpusToken = 4.0

	// Dropout by the expected number of passes over the corpus: none
	// below fewEpochs (a model that sees the text once or twice cannot
	// memorise it), light up to manyEpochs, 0.25 beyond (the value of the
	// issue's 2×512 report; Zaremba et al. 2014 use 0.5 for large word
	// models). Common practice, not measured here.
	fewEpochs  = 2
	manyEpochs = 10

	// annealTokens: the schedule anneals to the deadline when the model is
	// expected to train on at least this many tokens, and keeps a
	// constant rate below. A constant rate beat cosine and linear
	// annealing for lstm 1×256 on Moby-Dick at 1 M and 3 M tokens at every
	// peak rate tried (schedules.tsv, table.tsv), and for the fitted lstm
	// 1×128 on the State of the Union in 10 minutes (4.8 M tokens: 1.538
	// against 1.607 bits per character on the test split, sotu10.txt).
	// Annealing won at 8 M tokens (lstm 1×256 on Moby-Dick: 2.084
	// against 2.147, schedules-long.tsv) and narrowly at 14 M to 15 M in
	// the 30-minute runs (anneal30-refit.txt, sotu30.txt). 8 M, the
	// fewest tokens at which it won, is taken.
	annealTokens = 8000000
	// fitRate is the peak learning rate: 0.004 and 0.008 both beat the
	// default 0.002 by 0.14 to 0.32 bits at 3 M tokens for lstm 1×256,
	// with each schedule (schedules.tsv); 0.004, the lower, because
	// larger models were not measured at these rates.
	fitRate = 0.004

	// overfitEpochs: a plan that passes over the corpus more often warns
	// that the model will likely stop improving long before the deadline
	// (common practice; the grid did not reach it).
	overfitEpochs = 30
)

// ReferenceSpeed times the reference model on threads threads as weft
// bench trains it (rnn/bench: synthetic tokens below refVocab, the
// default batch of 32 streams × 64 steps, no dropout): 3 untimed windows,
// then 30 timed ones, about a second on one core of a current machine.
// Its tokens per second are FitInput.TokensPerSecond.
func ReferenceSpeed(ctx context.Context, threads int) (float64, error) {
	r := Default()
	r.Model.Cell, r.Model.Layers, r.Model.HiddenSize, r.Model.EmbeddingSize, r.Model.Dropout = "lstm", refLayers, refHidden, refEmbedding, 0
	r.Training.BatchSize, r.Training.UnrollSteps, r.Training.Threads = 32, 64, threads
	rep, err := bench.Train(ctx, r.Model, r.Training.TrainConfig, bench.Options{Vocab: refVocab, Warmup: 3, Windows: 30})
	if err != nil {
		return 0, err
	}
	if rep.Model.Parameters != refParams {
		return 0, fmt.Errorf("the reference model has %d parameters, want %d", rep.Model.Parameters, refParams)
	}
	return rep.TokensPerSecond, nil
}

// FitInput is what the sizing rule knows of the night.
type FitInput struct {
	Budget       time.Duration // the time budget of the run
	CorpusTokens int64         // tokens in the corpus (characters for "char")
	VocabSize    int           // the vocabulary size (about 100 for characters)
	Tokenizer    string        // "char" or "word" (others are treated as "char")
	Cores        int           // cores to train on, 1 or more
	// TokensPerSecond is the measured training speed of the reference
	// model (lstm 1×256) on this machine with Cores cores; zero means the
	// estimate refTokensPerCore × Cores.
	TokensPerSecond float64
}

// Fit is the sizing rule's choice, with the reason for each value.
type Fit struct {
	Layers, Hidden, Embedding int
	Dropout                   float64
	Unroll, Batch             int
	Schedule                  string
	LearningRate, MinRate     float64

	Params          int64   // parameters of the chosen model
	TokensPerSecond float64 // its expected training speed
	ExpectedTokens  int64   // training tokens it will see in the budget (margin kept)
	Epochs          float64 // ExpectedTokens over the training tokens
	TokensPerParam  float64 // ExpectedTokens / Params

	// Why gives the reason for each chosen run-file key.
	Why map[string]string
}

// LSTMParams is the parameter count of an LSTM stack with an embedding of
// e (0: one-hot input), layers of h units and a full output layer over v
// entries: embedding v·e, each layer 4h(in + h + 1), output v(h + 1).
// This is the count rnn.Model reports (checked in fit_test.go).
func LSTMParams(layers, h, e, v int) int64 {
	in := e
	if e == 0 {
		in = v
	}
	n := int64(v) * int64(e)
	for l := 0; l < layers; l++ {
		n += 4 * int64(h) * int64(in+h+1)
		in = h
	}
	return n + int64(v)*int64(h+1)
}

// costShare is the time per token of a model relative to the reference:
// a fixed part (the window bookkeeping, the elementwise gate work), a part
// per output entry (the softmax's exponentials and its memory traffic) and
// a part that grows with the parameters the products touch (all but the
// embedding table, a lookup):
//
//	share = f + g·V + (1 − f − g·V_ref) · P′/P′_ref
//
// f = 0.12 and g = 0.000164 come from a least-squares fit of the time per
// token, a + b·P′ + c·V, to the one-thread speeds of eight models in
// fitgrid/speeds.tsv (lstm 1×128 to 2×512 over 84 characters, 1×128 to
// 1×512 over 10,000 words), measured on an idle machine. Scaled from the
// measured 1×256 it is within 15% of every one of them (the furthest is
// 1×128 over characters, 14% faster than predicted; fit_test.go checks).
// Pure proportion to the parameters would make 2×512 9.5 times slower
// than 1×256 where it was 7.8 times slower, and a 10,000-word 1×128 3.2
// times faster than it was.
func costShare(layers, h, e, v int) float64 {
	ref := float64(refParams - refVocab*refEmbedding)
	p := float64(LSTMParams(layers, h, e, v) - int64(v)*int64(e))
	return fixedCostShare + vocabCostShare*float64(v) + (1-fixedCostShare-vocabCostShare*refVocab)*p/ref
}

type candidate struct{ layers, hidden int }

// ladder is the sizes the rule chooses from, smallest first.
var ladder = []candidate{{1, 128}, {1, 256}, {1, 384}, {1, 512}, {2, 512}, {2, 768}, {3, 1024}}

// Size applies the sizing rule: the largest model of the ladder that, at
// the expected speed (scaled from the reference model by costShare), trains on at least minTokensPerParam tokens per parameter in
// the budget less the plan margin, and has at most maxParamsPerCorpusToken
// parameters per training token; dropout by the expected passes over the
// corpus; unroll and embedding by the tokenizer; a peak rate of 0.004 and
// the "cosine" schedule annealing to the deadline when the model will see
// at least annealTokens tokens, a constant rate below. It is a pure
// function.
func Size(in FitInput) (Fit, error) {
	switch {
	case in.Budget <= 0:
		return Fit{}, fmt.Errorf("budget must be positive, got %v", in.Budget)
	case in.CorpusTokens < 1:
		return Fit{}, fmt.Errorf("corpus has no tokens")
	case in.Cores < 1:
		return Fit{}, fmt.Errorf("cores must be at least 1, got %d", in.Cores)
	case in.VocabSize < 2:
		return Fit{}, fmt.Errorf("vocabulary must have at least 2 entries, got %d", in.VocabSize)
	case in.TokensPerSecond < 0 || math.IsNaN(in.TokensPerSecond) || math.IsInf(in.TokensPerSecond, 0):
		return Fit{}, fmt.Errorf("tokens per second must be 0 (estimate) or positive, got %v", in.TokensPerSecond)
	}
	ref, refWhy := in.TokensPerSecond, "measured"
	if ref == 0 {
		ref, refWhy = refTokensPerCore*float64(in.Cores), fmt.Sprintf("estimated at %d tokens/s per core", refTokensPerCore)
	}
	f := Fit{Batch: 32, Schedule: "cosine", LearningRate: fitRate, MinRate: 0.0001, Why: map[string]string{}}
	f.Embedding, f.Unroll = 64, 64
	if in.Tokenizer == "word" {
		f.Embedding, f.Unroll = 128, 35
	}
	seconds := in.Budget.Seconds() * (1 - PlanMargin)
	pick := ladder[0]
	var pickWhy string
	for _, c := range ladder {
		p := LSTMParams(c.layers, c.hidden, f.Embedding, in.VocabSize)
		tps := ref / costShare(c.layers, c.hidden, f.Embedding, in.VocabSize)
		tokens := tps * seconds
		if c != ladder[0] && (tokens/float64(p) < minTokensPerParam || float64(p) > maxParamsPerCorpusToken*float64(in.CorpusTokens)) {
			break
		}
		pick = c
		pickWhy = fmt.Sprintf("the largest size with at least %d training tokens per parameter in the budget and at most %g parameters per corpus token", minTokensPerParam, maxParamsPerCorpusToken)
	}
	f.Layers, f.Hidden = pick.layers, pick.hidden
	f.Params = LSTMParams(f.Layers, f.Hidden, f.Embedding, in.VocabSize)
	f.TokensPerSecond = ref / costShare(f.Layers, f.Hidden, f.Embedding, in.VocabSize)
	f.ExpectedTokens = int64(f.TokensPerSecond * seconds)
	f.Epochs = float64(f.ExpectedTokens) / float64(in.CorpusTokens)
	f.TokensPerParam = float64(f.ExpectedTokens) / float64(f.Params)
	switch {
	case f.Epochs < fewEpochs:
		f.Dropout = 0
		f.Why["model.dropout"] = fmt.Sprintf("%.1f expected passes over the corpus: too few to memorise it", f.Epochs)
	case f.Epochs < manyEpochs:
		f.Dropout = 0.1
		f.Why["model.dropout"] = fmt.Sprintf("%.1f expected passes over the corpus: light regularisation", f.Epochs)
	default:
		f.Dropout = 0.25
		f.Why["model.dropout"] = fmt.Sprintf("%.0f expected passes over the corpus: the model would memorise it without regularisation", f.Epochs)
	}
	f.Why["model.hidden_size"] = fmt.Sprintf("%s: %s parameters, %.0f tokens per parameter at %.0f tokens/s (reference speed %s)",
		pickWhy, group(f.Params), f.TokensPerParam, f.TokensPerSecond, refWhy)
	f.Why["model.layers"] = f.Why["model.hidden_size"]
	f.Why["model.embedding_size"] = "64 for characters, 128 for words (the presets' values)"
	f.Why["training.unroll_steps"] = "64 steps for characters, 35 for words (the presets' values; not varied in the grid)"
	f.Why["training.batch_size"] = "32 streams (the default; the grid held it fixed)"
	if f.ExpectedTokens >= annealTokens {
		f.Why["training.schedule"] = fmt.Sprintf("anneals to the deadline (the run plans its length from its measured speed): %s expected tokens, at least the %s from which annealing beat a constant rate in our measurements", group(f.ExpectedTokens), group(annealTokens))
	} else {
		f.Schedule = "constant"
		f.Why["training.schedule"] = fmt.Sprintf("a constant rate: %s expected tokens, fewer than the %s below which a constant rate beat annealing in our measurements", group(f.ExpectedTokens), group(annealTokens))
	}
	f.Why["training.learning_rate"] = "0.004: twice the default, which lost to 0.004 and 0.008 in our measurements"
	f.Why["training.min_learning_rate"] = "the floor of an annealing schedule: 1/40 of learning_rate"
	return f, nil
}

// PlanMargin is the fraction of the time left that a run annealing to its
// deadline leaves unplanned (runs.PlanMargin is this value), so that the
// schedule ends before the deadline on a machine that slows down.
const PlanMargin = 0.10

// RunFile writes f as a commented run file for the corpus files and the
// tokenizer, every chosen value with the reason in a comment.
func (f Fit) RunFile(files []string, tokenizer string, budget time.Duration) string {
	var b strings.Builder
	q := make([]string, len(files))
	for i, s := range files {
		q[i] = fmt.Sprintf("%q", s)
	}
	fmt.Fprintf(&b, "# weft run file sized for a %v budget by 'weft config new --fit'.\n", budget)
	fmt.Fprintf(&b, "# Expected: %.0f tokens/s, %s training tokens, %.1f passes over the corpus,\n# %.0f tokens per parameter. Train it with --for %v (or --until).\n\n",
		f.TokensPerSecond, group(f.ExpectedTokens), f.Epochs, f.TokensPerParam, budget)
	fmt.Fprintf(&b, "[data]\nfiles = [%s]\ntokenizer = %q\n", strings.Join(q, ", "), tokenizer)
	if tokenizer == "word" {
		b.WriteString("max_vocabulary = 10000  # rare words share the unknown symbol: keeps the output layer affordable\n")
	}
	b.WriteString("\n[model]\ncell = \"lstm\"\n")
	fmt.Fprintf(&b, "layers = %d  # %s\n", f.Layers, f.Why["model.layers"])
	fmt.Fprintf(&b, "hidden_size = %d  # see layers\n", f.Hidden)
	fmt.Fprintf(&b, "embedding_size = %d  # %s\n", f.Embedding, f.Why["model.embedding_size"])
	fmt.Fprintf(&b, "dropout = %g  # %s\n", f.Dropout, f.Why["model.dropout"])
	b.WriteString("\n[training]\n")
	fmt.Fprintf(&b, "batch_size = %d  # %s\n", f.Batch, f.Why["training.batch_size"])
	fmt.Fprintf(&b, "unroll_steps = %d  # %s\n", f.Unroll, f.Why["training.unroll_steps"])
	fmt.Fprintf(&b, "learning_rate = %g  # %s\n", f.LearningRate, f.Why["training.learning_rate"])
	fmt.Fprintf(&b, "schedule = %q  # %s\n", f.Schedule, f.Why["training.schedule"])
	if f.Schedule != "constant" {
		fmt.Fprintf(&b, "min_learning_rate = %g  # %s\n", f.MinRate, f.Why["training.min_learning_rate"])
		b.WriteString("max_steps = 0  # no step budget: the deadline plans the steps\n")
	} else {
		b.WriteString("max_steps = 0  # no step budget: the deadline (--for, --until) ends the run\n")
	}
	b.WriteString("\n[evaluation]\nevery_steps = 1000\n\n[checkpoint]\nevery_steps = 1000\nkeep_last = 3\n")
	return b.String()
}

// CheckProportion returns warnings, with the numbers, when the tokens a
// run will train on before its deadline are out of proportion to its
// corpus: fewer than one pass over it (the model is too large or the
// budget too short to see the text once), or more than overfitEpochs
// passes while the model has under a quarter of the parameters the sizing
// rule allows for the corpus (it is small for the night and will likely
// stop improving long before the deadline, where a larger one would not).
func CheckProportion(expectTokens, trainTokens, params int64, left time.Duration) []string {
	if trainTokens <= 0 || expectTokens <= 0 {
		return nil
	}
	epochs := float64(expectTokens) / float64(trainTokens)
	perParam := float64(expectTokens) / float64(max(params, 1))
	var out []string
	if epochs < 1 {
		out = append(out, fmt.Sprintf("out of proportion: at the measured speed the model will train on about %s tokens in the %v left, %.2f of one pass over the %s training tokens (%.1f tokens per parameter); a smaller model (weft config new --fit) or a longer budget sees the whole corpus",
			group(expectTokens), left.Round(time.Second), epochs, group(trainTokens), perParam))
	}
	if epochs > overfitEpochs && float64(params) < maxParamsPerCorpusToken*float64(trainTokens)/4 {
		out = append(out, fmt.Sprintf("out of proportion: at the measured speed the model will pass over its %s training tokens about %.0f times in the %v left (%.0f tokens per parameter, %s parameters); it will likely stop improving long before the deadline: a larger model with dropout (weft config new --fit) or training.early_stop_patience uses the night better",
			group(trainTokens), epochs, left.Round(time.Second), perParam, group(params)))
	}
	return out
}

// group writes n with thousands separators.
func group(n int64) string {
	s := fmt.Sprint(n)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	if neg {
		return "-" + b.String()
	}
	return b.String()
}
