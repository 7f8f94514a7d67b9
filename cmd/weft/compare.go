package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"sort"
	"strings"
	"text/tabwriter"

	"weft/data"
	"weft/eval"
)

// candidate is one model of a comparison with its scores on the
// validation split (used to choose the best baseline and to tune the
// interpolation, never to report) and on the reported split.
type candidate struct {
	name      string
	kind      string // "rnn", "ngram", "markov", "hmm", "interpolated"
	model     eval.LanguageModel
	stateBits float64 // log2 N for an HMM
	val, rep  []float64
}

func (c *candidate) isBaseline() bool {
	return c.kind == "ngram" || c.kind == "markov" || c.kind == "hmm"
}

// comparison is the outcome of comparing models on one held-out split.
type comparison struct {
	Split        string
	Rows         []eval.Result // best first
	BestBaseline string        // chosen on the validation split
	// BestBaselineValBPC is that baseline's validation bits per character.
	BestBaselineValBPC float64
	Lambda             float64 // interpolation weight of the recurrent model, NaN when none
	Bands              []modelBreakdown
	LongRange          []modelBreakdown // for the demo corpus: marked vs other positions
}

type modelBreakdown struct {
	Model string           `json:"model"`
	Parts []eval.Breakdown `json:"parts"`
}

// compareModels scores every candidate on the validation split and on the
// reported split, picks the best baseline on validation, adds the row of the
// recurrent model interpolated with it, and computes bootstrap intervals on
// the reported split. marks, when not nil, flags the tokens of the reported
// split to break down separately (the demo's long-range positions).
func compareModels(ctx context.Context, cfg eval.Config, ds *data.Dataset, split string, cands []*candidate, marks []bool, progress eval.ProgressFunc) (*comparison, error) {
	val := ds.Validation
	rep := ds.Test
	if split == "validation" {
		rep = ds.Validation
	}
	if len(rep.Tokens) == 0 {
		return nil, fmt.Errorf("the %s split is empty: raise data.%s_fraction", split, map[string]string{"test": "test", "validation": "validation"}[split])
	}
	for i, c := range cands {
		if progress != nil {
			progress("score models on validation and "+split, i, len(cands))
		}
		c.val = make([]float64, len(val.Tokens))
		if err := c.model.LogProbs(ctx, c.val, val.Tokens); err != nil {
			return nil, fmt.Errorf("score %s on validation: %w", c.name, err)
		}
		if split == "validation" {
			c.rep = c.val
			continue
		}
		c.rep = make([]float64, len(rep.Tokens))
		if err := c.model.LogProbs(ctx, c.rep, rep.Tokens); err != nil {
			return nil, fmt.Errorf("score %s on %s: %w", c.name, split, err)
		}
	}
	if progress != nil {
		progress("score models on validation and "+split, len(cands), len(cands))
	}
	cmp := &comparison{Split: split, Lambda: math.NaN(), BestBaselineValBPC: math.NaN()}

	// The best baseline is chosen on validation, so the reported split
	// stays untouched by the choice.
	best := -1
	bestBPC := math.Inf(1)
	for i, c := range cands {
		if !c.isBaseline() {
			continue
		}
		if b := totalBits(c.val) / float64(val.Characters); b < bestBPC {
			best, bestBPC = i, b
		}
	}
	if best >= 0 {
		cmp.BestBaseline = cands[best].name
		cmp.BestBaselineValBPC = bestBPC
	}
	rnnIdx := -1
	for i, c := range cands {
		if c.kind == "rnn" {
			rnnIdx = i
			break
		}
	}
	if cfg.Interpolate && rnnIdx >= 0 && best >= 0 {
		lambda, err := eval.TuneMixture(cands[rnnIdx].val, cands[best].val)
		if err != nil {
			return nil, err
		}
		mixRep := make([]float64, len(rep.Tokens))
		eval.MixLogProbs(mixRep, cands[rnnIdx].rep, cands[best].rep, lambda)
		cmp.Lambda = lambda
		cands = append(cands, &candidate{
			name: fmt.Sprintf("%s + %s (λ=%.2f)", cands[rnnIdx].name, cands[best].name, lambda),
			kind: "interpolated",
			rep:  mixRep,
		})
	}

	chars := rep.TokenChars(nil)
	closedVocab := ds.Vocab.Kind() == data.KindWord || ds.Vocab.Kind() == data.KindSymbols
	results := make([]eval.Result, len(cands))
	series := make([]eval.Series, len(cands))
	for i, c := range cands {
		r := eval.NewResult(c.name, c.kind, split, c.rep, int(rep.Characters))
		r.SetUnknown(rep.Tokens, ds.Vocab.Unknown(), closedVocab)
		r.StateBits = c.stateBits
		results[i] = r
		series[i] = eval.Series{LogProbs: c.rep, Chars: chars}
	}
	if cfg.BootstrapSamples > 0 && len(cands) > 0 {
		ref := best
		if ref < 0 {
			ref = 0
		}
		bpc, diff, err := eval.Bootstrap(series, ref, eval.BootstrapConfig{
			Samples: cfg.BootstrapSamples, BlockChars: cfg.BootstrapBlockChars,
			Level: cfg.ConfidenceLevel, Seed: cfg.Seed,
		})
		if err != nil {
			return nil, err
		}
		for i := range results {
			results[i].CILow, results[i].CIHigh = bpc[i].Low, bpc[i].High
			if best >= 0 {
				results[i].Reference = cands[best].name
				results[i].DiffBitsPerChar = diff[i].Estimate
				results[i].DiffCILow, results[i].DiffCIHigh = diff[i].Low, diff[i].High
			}
		}
	}

	// Breakdowns for the models a reader compares: the recurrent one, the
	// interpolation and the best baseline.
	counts := eval.TokenCounts(ds.Train.Tokens, ds.Vocab.Len())
	for _, c := range cands {
		if c.kind != "rnn" && c.kind != "interpolated" && (best < 0 || c.name != cands[best].name) {
			continue
		}
		cmp.Bands = append(cmp.Bands, modelBreakdown{c.name, eval.FrequencyBands(c.rep, rep.Tokens, chars, counts)})
		if marks != nil {
			in, out := eval.Marked(c.rep, chars, marks)
			in.Label, out.Label = "long-range positions", "all other positions"
			cmp.LongRange = append(cmp.LongRange, modelBreakdown{c.name, []eval.Breakdown{in, out}})
		}
	}

	sortBestFirst(results)
	cmp.Rows = results
	return cmp, nil
}

// sortBestFirst orders rows by bits per character, best first, NaN last,
// keeping the given order among equals.
func sortBestFirst(rows []eval.Result) {
	sort.SliceStable(rows, func(i, j int) bool { return lessBPC(rows[i].BitsPerChar, rows[j].BitsPerChar) })
}

// lessBPC orders scores best first, NaN last.
func lessBPC(a, b float64) bool {
	if math.IsNaN(b) {
		return !math.IsNaN(a)
	}
	return a < b
}

func totalBits(logp []float64) float64 {
	var s float64
	for _, lp := range logp {
		s -= lp
	}
	return s / math.Ln2
}

// printComparison writes the comparison table, best first.
func printComparison(w io.Writer, cmp *comparison) {
	fmt.Fprintf(w, "held-out %s split, best first; intervals are %s block-bootstrap intervals\n", cmp.Split, "95%")
	if cmp.BestBaseline != "" {
		fmt.Fprintf(w, "best baseline (chosen on the validation split): %s\n", cmp.BestBaseline)
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "model\tkind\tbits/char\tinterval\tvs best baseline\tbits/token\tperplexity\tnote")
	for _, r := range cmp.Rows {
		note := ""
		if !r.Comparable {
			note = "not comparable on bits/char: closed vocabulary"
		}
		if r.ZeroProbTokens > 0 {
			note = fmt.Sprintf("%d tokens given probability zero", r.ZeroProbTokens)
		}
		if r.StateBits > 0 {
			note = strings.TrimSpace(note + fmt.Sprintf(" state holds %.0f bits", r.StateBits))
		}
		diff := "-"
		if r.Reference != "" && r.Model != r.Reference && !math.IsNaN(r.DiffBitsPerChar) {
			diff = fmt.Sprintf("%+.3f [%+.3f, %+.3f]", r.DiffBitsPerChar, r.DiffCILow, r.DiffCIHigh)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", r.Model, r.Kind, num(r.BitsPerChar, 3),
			interval(r.CILow, r.CIHigh), diff, num(r.BitsPerToken, 3), num(r.Perplexity, 2), note)
	}
	tw.Flush()
	if len(cmp.LongRange) > 0 {
		fmt.Fprintln(w, "\nbits per character at the positions only long-range context predicts (demo corpus marks):")
		printBreakdowns(w, cmp.LongRange)
	}
	if len(cmp.Bands) > 0 {
		fmt.Fprintln(w, "\nbits per character by how often the token was seen in training:")
		printBreakdowns(w, cmp.Bands)
	}
}

func printBreakdowns(w io.Writer, bs []modelBreakdown) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "model\tpositions\ttokens\tbits/char")
	for _, b := range bs {
		for _, p := range b.Parts {
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", b.Model, p.Label, thousands(int64(p.Tokens)), num(p.BitsPerChar, 3))
		}
	}
	tw.Flush()
}

func num(v float64, prec int) string {
	switch {
	case math.IsNaN(v):
		return "-"
	case math.IsInf(v, 1):
		return "inf"
	}
	return fmt.Sprintf("%.*f", prec, v)
}

func interval(lo, hi float64) string {
	if math.IsNaN(lo) || math.IsNaN(hi) {
		return "-"
	}
	return fmt.Sprintf("[%s, %s]", num(lo, 3), num(hi, 3))
}
