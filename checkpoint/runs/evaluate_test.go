package runs

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"weft/eval"
)

// TestEvaluate compares a trained tiny run with its baselines, as 'weft
// eval' does, and checks what it saves: a report that eval's reader loads
// back with the same rows, the recurrent row first in the inputs and every
// configured baseline present.
func TestEvaluate(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.NgramOrders, r.Evaluation.NgramSmoothers = []int{1, 3}, []string{"kneser_ney"}
	r.Evaluation.MarkovOrders, r.Evaluation.HMMStates = []int{1}, nil
	run := filepath.Join(dir, "run")
	ctx := context.Background()

	d, err := Open(run)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Evaluate(ctx, r, d, EvalOptions{}); !errors.As(err, new(*ModelError)) {
		t.Errorf("untrained run: got %v, want a *ModelError", err)
	}
	d.Close()
	if _, _, err := train(t, ctx, r, run, 20, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	d, err = Open(run)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	if _, err := Evaluate(ctx, r, d, EvalOptions{Streams: 2, Warmup: -1}); !errors.Is(err, ErrScoring) {
		t.Errorf("negative warm-up: got %v, want ErrScoring", err)
	}
	cmp, err := Evaluate(ctx, r, d, EvalOptions{})
	if err != nil {
		t.Fatal(err)
	}
	labels := map[string]bool{}
	for _, row := range cmp.Rows {
		labels[row.Model] = true
	}
	for _, want := range []string{"lstm 1x16 (step 20)", "1-gram kneser_ney", "3-gram kneser_ney", "markov-1(add 1)"} {
		if !labels[want] {
			t.Errorf("no row %q in %v", want, labels)
		}
	}
	f, err := os.Open(filepath.Join(d.Report(), "eval-test.json"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	back, err := eval.ReadReport(f)
	if err != nil {
		t.Fatal(err)
	}
	if len(back.Rows) != len(cmp.Rows) || back.BestBaseline != cmp.BestBaseline || back.Split != "test" {
		t.Errorf("saved report: %d rows, best %q, split %q; want %d, %q, test", len(back.Rows), back.BestBaseline, back.Split, len(cmp.Rows), cmp.BestBaseline)
	}
	only, err := Evaluate(ctx, r, d, EvalOptions{BaselinesOnly: true, Split: "validation"})
	if err != nil {
		t.Fatal(err)
	}
	for _, row := range only.Rows {
		if row.Kind == "rnn" || row.Kind == "interpolated" {
			t.Errorf("baselines only: row %q of kind %s", row.Model, row.Kind)
		}
	}
}

// TestHeldOutTokensCap evaluates a trained tiny run with
// evaluation.heldout_tokens below its splits' lengths: every row scores
// exactly the first tokens, the recurrent row's bits are those of
// LogProbs over that prefix alone (summed as eval.NewResult sums), the
// note says so and is saved, and without the cap nothing is noted.
func TestHeldOutTokensCap(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.NgramOrders, r.Evaluation.NgramSmoothers = []int{2}, []string{"witten_bell"}
	r.Evaluation.MarkovOrders, r.Evaluation.HMMStates = nil, nil
	run := filepath.Join(dir, "run")
	ctx := context.Background()
	if _, _, err := train(t, ctx, r, run, 10, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	d, err := Open(run)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	whole, err := Evaluate(ctx, r, d, EvalOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if whole.ScoredNote != "" {
		t.Errorf("whole splits noted %q", whole.ScoredNote)
	}
	const max = 300
	r.Evaluation.HeldOutTokens = max
	capped, err := Evaluate(ctx, r, d, EvalOptions{})
	if err != nil {
		t.Fatal(err)
	}
	ds, err := Prepare(ctx, r, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer ds.Close()
	if n := ds.Test.Tokens.Len(); n <= max || whole.Rows[0].Tokens != n {
		t.Fatalf("the test split has %d tokens (the whole comparison scored %d); the test needs more than %d", n, whole.Rows[0].Tokens, max)
	}
	want := fmt.Sprintf("scored on the first 300 of %s test tokens and the first 300 of %s validation tokens (evaluation.heldout_tokens)",
		groupDigitsTest(ds.Test.Tokens.Len()), groupDigitsTest(ds.Validation.Tokens.Len()))
	if capped.ScoredNote != want {
		t.Errorf("note %q, want %q", capped.ScoredNote, want)
	}
	m, err := OpenModel(run, "best")
	if err != nil {
		t.Fatal(err)
	}
	ids := ds.Test.Tokens.Ints()[:max]
	lp := make([]float64, max)
	if err := m.Net.LogProbs(ctx, lp, ids); err != nil {
		t.Fatal(err)
	}
	ref := eval.NewResult("", "", "", lp, 1)
	for _, row := range capped.Rows {
		if row.Tokens != max {
			t.Errorf("row %s scored %d tokens, want %d", row.Model, row.Tokens, max)
		}
		if row.Kind == "rnn" && row.CrossEntropyBits != ref.CrossEntropyBits {
			t.Errorf("recurrent row: %v bits, LogProbs over the first %d tokens gives %v", row.CrossEntropyBits, max, ref.CrossEntropyBits)
		}
	}
	f, err := os.Open(filepath.Join(d.Report(), "eval-test.json"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if back, err := eval.ReadReport(f); err != nil || back.ScoredNote != want {
		t.Errorf("saved report: note %q (%v), want %q", back.ScoredNote, err, want)
	}
}

func groupDigitsTest(n int) string {
	s := fmt.Sprint(n)
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + "," + s[i:]
	}
	return s
}

// TestPrepareCleansSpool: the spool file an interrupted encoding left in a
// run directory (as large as the token cache) is removed when the
// directory is next prepared under its lock; the cache is written anew.
func TestPrepareCleansSpool(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	d, err := Open(filepath.Join(dir, "run"))
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	stale := filepath.Join(d.Path(), ".tmp-encoding-1234")
	if err := os.WriteFile(stale, make([]byte, 4096), 0o644); err != nil {
		t.Fatal(err)
	}
	ds, err := Prepare(context.Background(), r, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer ds.Close()
	if _, err := os.Stat(stale); !os.IsNotExist(err) {
		t.Errorf("the stale spool file is still there (%v)", err)
	}
	if ds.Train.Tokens.Len() == 0 {
		t.Error("no training tokens")
	}
}
