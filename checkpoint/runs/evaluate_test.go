package runs

import (
	"context"
	"errors"
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
