package main

import (
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"

	"weft/eval"
)

// comparison is the outcome of comparing models on one held-out split, as
// eval.Compare builds it.
type comparison = eval.Comparison

// shownRows picks the rows the table prints: the best of each family with
// the best baseline (the default), every row (all), or the top best.
func shownRows(cmp *comparison, all bool, top int) []eval.Result {
	switch {
	case top > 0:
		return cmp.Rows[:min(top, len(cmp.Rows))]
	case all:
		return cmp.Rows
	}
	return eval.FamilyBest(cmp.Rows, cmp.BestBaseline)
}

// printComparison writes the comparison table of rows (of cmp, best
// first), saying how many of cmp's rows it leaves out.
func printComparison(w io.Writer, cmp *comparison, rows []eval.Result) {
	if cmp.BlockChars > 0 {
		fmt.Fprintf(w, "held-out %s split, best first; intervals are %s%% moving-block bootstrap intervals (blocks of %d characters)\n",
			cmp.Split, strconv.FormatFloat(100*cmp.ConfidenceLevel, 'g', 4, 64), cmp.BlockChars)
	} else {
		fmt.Fprintf(w, "held-out %s split, best first\n", cmp.Split)
	}
	if cmp.IntervalNote != "" {
		fmt.Fprintf(w, "%s\n", cmp.IntervalNote)
	}
	if cmp.ScoredNote != "" {
		fmt.Fprintf(w, "%s\n", cmp.ScoredNote)
	}
	if cmp.CharacterUnit != "" {
		fmt.Fprintf(w, "a character here is %s\n", cmp.CharacterUnit)
	}
	if cmp.BestBaseline != "" {
		fmt.Fprintf(w, "best baseline (chosen on the validation split): %s\n", cmp.BestBaseline)
	}
	if cmp.TunedOnReported {
		fmt.Fprintln(w, "the best baseline and the interpolation weight were chosen on this same split: the 'vs best baseline' column and the interpolated row are optimistic (report the test split)")
	}
	if cmp.InterpolationPartner != "" {
		fmt.Fprintf(w, "interpolated with the best n-gram (chosen on the validation split): %s, weight %.3f on the recurrent model (tuned on the validation split)\n",
			cmp.InterpolationPartner, cmp.Lambda)
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "model\tkind\tbits/char\tinterval\tvs best baseline\tbits/token\tperplexity\tnote")
	var reasons []string
	for _, r := range rows {
		var notes []string
		if !r.Comparable {
			notes = append(notes, "not comparable on bits/char (*)")
			if !slices.Contains(reasons, r.NotComparable) {
				reasons = append(reasons, r.NotComparable)
			}
		}
		if cmp.TunedOnReported && r.Model == cmp.BestBaseline {
			notes = append(notes, "chosen on this split")
		}
		if cmp.TunedOnReported && r.Kind == "interpolated" {
			notes = append(notes, "weight tuned on this split")
		}
		if r.ZeroProbTokens > 0 {
			notes = append(notes, fmt.Sprintf("%d tokens given probability zero", r.ZeroProbTokens))
		}
		if r.StateBits > 0 {
			notes = append(notes, fmt.Sprintf("state holds %.0f bits", r.StateBits))
		}
		if r.TrainingNote != "" {
			notes = append(notes, r.TrainingNote)
		}
		note := strings.Join(notes, "; ")
		diff := "-"
		if r.Reference != "" && r.Model != r.Reference && !math.IsNaN(r.DiffBitsPerChar) {
			diff = fmt.Sprintf("%+.3f [%+.3f, %+.3f]", r.DiffBitsPerChar, r.DiffCILow, r.DiffCIHigh)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", r.Model, r.Kind, num(r.BitsPerChar, 3),
			interval(r.CILow, r.CIHigh), diff, num(r.BitsPerToken, 3), num(r.Perplexity, 2), note)
	}
	tw.Flush()
	if left := len(cmp.Rows) - len(rows); left > 0 {
		fmt.Fprintf(w, "(%d more rows: --all lists every row, --top N the N best; the report folder's eval-%s.json has them all)\n", left, cmp.Split)
	}
	for _, r := range reasons {
		fmt.Fprintf(w, "(*) not comparable on bits per character: %s\n", r)
	}
	if len(cmp.LongRange) > 0 {
		fmt.Fprintln(w, "\nbits per character at the positions only long-range context predicts (demo corpus marks):")
		printBreakdowns(w, cmp.LongRange)
	}
	if len(cmp.Bands) > 0 {
		fmt.Fprintln(w, "\nbits per character by how often the token was seen in training:")
		printBreakdowns(w, cmp.Bands)
	}
}

func printBreakdowns(w io.Writer, bs []eval.ModelBreakdown) {
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
