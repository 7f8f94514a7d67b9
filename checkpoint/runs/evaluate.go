package runs

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"weft/checkpoint"
	"weft/configs"
	"weft/data"
	"weft/data/demo"
	"weft/eval"
	"weft/rnn/linalg"
)

// ModelError is Evaluate's error when the run's model cannot be opened
// (the run has not been trained, say); it wraps OpenModel's error.
type ModelError struct{ Err error }

func (e *ModelError) Error() string { return e.Err.Error() }
func (e *ModelError) Unwrap() error { return e.Err }

// ErrScoring is wrapped by Evaluate's error when the scoring layout it was
// asked for (streams, warm-up) is invalid.
var ErrScoring = errors.New("invalid scoring layout")

// EvalOptions say what Evaluate compares.
type EvalOptions struct {
	// Checkpoint picks the model: "best" (or empty), "latest", a step or a
	// file name inside the checkpoints folder (see OpenModel).
	Checkpoint string
	// Split is the reported split, "test" (or empty) or "validation".
	Split string
	// Streams and Warmup lay the recurrent model's scoring out as that
	// many pieces side by side, each after the first warmed up on Warmup
	// tokens (rnn.Model.SetScoring); 0 or 1 stream is exact.
	Streams, Warmup int
	// BaselinesOnly compares the baselines without a trained model.
	BaselinesOnly bool
	// Threads is the number of threads the recurrent model's products use;
	// 0 or 1: one. The results do not depend on it.
	Threads int
	// Progress hears the stages of fitting and scoring; Note hears why a
	// cached ladder was refitted. Either may be nil.
	Progress eval.ProgressFunc
	Note     func(string)
	// Stdin is read when the run file's corpus is "-".
	Stdin io.Reader
}

// Evaluate compares the run's model (the checkpoint o names) with its
// baselines, fitted or loaded from the baselines folder, on the held-out
// split o names, with eval.Compare (best baseline and interpolation weight
// chosen on validation), and saves the comparison as the report folder's
// eval-SPLIT.json.
func Evaluate(ctx context.Context, r *configs.Run, d *Dir, o EvalOptions) (*eval.Comparison, error) {
	split := o.Split
	if split == "" {
		split = data.SplitTest
	}
	ds, err := Prepare(ctx, r, d, o.Stdin)
	if err != nil {
		return nil, err
	}
	defer ds.Close()
	if ds.Cache.Damaged != nil && o.Note != nil {
		o.Note(DamagedCache(ds.Cache.Damaged))
	}
	ladder, err := FitBaselines(ctx, r.Evaluation.Config, ds, d.Baselines(), o.Progress, o.Note)
	if err != nil {
		return nil, err
	}
	models := BaselineEntrants(ladder)
	if !o.BaselinesOnly {
		m, err := OpenModel(d.Path(), o.Checkpoint)
		if err != nil {
			return nil, &ModelError{err}
		}
		if m.Vocab.Len() != ds.Vocab.Len() {
			return nil, fmt.Errorf("checkpoint %s: vocabulary of %d entries, the run's corpus has %d", m.Path, m.Vocab.Len(), ds.Vocab.Len())
		}
		if err := m.Net.SetScoring(max(o.Streams, 1), o.Warmup); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrScoring, err)
		}
		if o.Threads > 1 {
			pool := linalg.NewPool(o.Threads)
			defer pool.Close()
			m.Net.SetPool(pool)
		}
		models = append([]eval.Entrant{{Model: m.Net, Label: ModelLabel(m), Kind: "rnn"}}, models...)
	}
	var marks []bool
	if len(r.Data.Files) == 1 {
		sp := ds.Test
		if split == data.SplitValidation {
			sp = ds.Validation
		}
		if marks, err = demo.SplitMarks(r.Data.Files[0], sp); err != nil {
			return nil, err
		}
	}
	cmp, err := CompareDataset(ctx, r.Evaluation.Config, ds, split, models, marks, o.Progress)
	if err != nil {
		return nil, err
	}
	if err := os.MkdirAll(d.Report(), 0o755); err != nil {
		return nil, fmt.Errorf("report folder: %w", err)
	}
	if err := d.WriteJSON(filepath.Join(ReportDir, "eval-"+split+".json"), cmp); err != nil {
		return nil, err
	}
	return cmp, nil
}

// ModelLabel names a model's row: cell, layers × units and step.
func ModelLabel(m *checkpoint.Model) string {
	c := m.Config
	return fmt.Sprintf("%s %dx%d (step %d)", c.Cell, c.Layers, c.HiddenSize, m.Step)
}

// BaselineEntrants lists the models of a fitted ladder as comparison
// entrants.
func BaselineEntrants(l *eval.Ladder) []eval.Entrant {
	var out []eval.Entrant
	for _, m := range l.Models() {
		out = append(out, eval.Entrant{Model: m, Label: m.Name()})
	}
	return out
}

// CompareDataset compares models on the reported split of ds ("test" or
// "validation") with eval.Compare: the best baseline and the interpolation
// weight are chosen on the validation split. marks, when not nil, flags
// the tokens of the reported split to break down separately.
func CompareDataset(ctx context.Context, cfg eval.Config, ds *data.Dataset, split string, models []eval.Entrant, marks []bool, progress eval.ProgressFunc) (*eval.Comparison, error) {
	rep := ds.Test
	if split == data.SplitValidation {
		rep = ds.Validation
	}
	val := HeldOut(ds.Validation, cfg.HeldOutTokens)
	reported := val
	if rep != ds.Validation {
		reported = HeldOut(rep, cfg.HeldOutTokens)
	}
	if len(marks) > len(reported.Tokens) {
		marks = marks[:len(reported.Tokens)]
	}
	return eval.Compare(ctx, cfg, eval.CompareInput{
		Split:         split,
		Validation:    val,
		Reported:      reported,
		Models:        models,
		Unknown:       ds.Vocab.Unknown(),
		Lowercased:    ds.Vocab.Lowercase(),
		CharacterUnit: characterUnit(ds.Vocab.Kind()),
		TrainCounts:   eval.TokenCountsOf(ds.Train.Tokens, ds.Vocab.Len()),
		Marks:         marks,
		Progress:      progress,
	})
}

// scoredTokens is how many of a held-out split's n tokens are scored under
// evaluation.heldout_tokens = max: the first max of them, all when max is 0.
func scoredTokens(n, max int) int {
	if max > 0 {
		return min(n, max)
	}
	return n
}

// HeldOut is the split as eval.Compare scores it: its ids and the
// characters each stands for, only its first max tokens when max > 0 and
// the split is longer (evaluation.heldout_tokens; HeldOut.Of then says how
// long the split is). It costs 16 bytes a token it holds.
func HeldOut(s *data.Split, max int) eval.HeldOut {
	var h eval.HeldOut
	n := scoredTokens(s.Tokens.Len(), max)
	if n < s.Tokens.Len() {
		h.Of = s.Tokens.Len()
	}
	h.Tokens = make([]int, n)
	s.Tokens.Read(h.Tokens, 0)
	h.Chars = s.WindowChars(make([]int, n), h.Tokens, 0)
	return h
}

// characterUnit says what a character of Split.TokenChars is for the
// tokenizer kind: for symbols the whitespace between symbols belongs to no
// token and is not counted; "" (a character of the text) otherwise.
func characterUnit(k data.Kind) string {
	if k == data.KindSymbols {
		return "a character of a symbol or a line end (the whitespace between symbols is not counted)"
	}
	return ""
}

// ScoreOnValidation scores each model on ds's validation split, dividing
// by the characters its tokens cover (eval.Compare's denominator), in the
// order given: on the first max tokens of the split when max > 0 and it is
// longer (evaluation.heldout_tokens), as eval.Compare does.
func ScoreOnValidation(ctx context.Context, ds *data.Dataset, max int, models []eval.Entrant, progress eval.ProgressFunc) ([]eval.Result, error) {
	const stage = "score baselines on validation"
	h := HeldOut(ds.Validation, max)
	chars := 0
	for _, c := range h.Chars {
		chars += c
	}
	var rows []eval.Result
	ids := h.Tokens
	lp := make([]float64, len(ids))
	for i, e := range models {
		if progress != nil {
			progress(stage, i, len(models))
		}
		if err := e.Model.LogProbs(ctx, lp, ids); err != nil {
			return nil, fmt.Errorf("score %s: %w", e.Model.Name(), err)
		}
		kind := e.Kind
		if k, ok := e.Model.(eval.Kinder); ok && kind == "" {
			kind = k.Kind()
		}
		res := eval.NewResult(e.Model.Name(), kind, data.SplitValidation, lp, chars)
		if sb, ok := e.Model.(eval.StateBitser); ok {
			res.StateBits = sb.StateBits()
		}
		rows = append(rows, res)
	}
	if progress != nil {
		progress(stage, len(models), len(models))
	}
	return rows, nil
}
