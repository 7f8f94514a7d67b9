package sweep

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"weft/checkpoint/runs"
)

// baseRun is a valid run file; the plan tests never train, so its corpus
// need not exist.
const baseRun = `[data]
files = ["corpus.txt"]

[model]
hidden_size = 16

[training]
max_steps = 10
`

// writeSweep writes base.toml and sweep.toml into dir and returns the
// sweep file's path.
func writeSweep(t *testing.T, dir, sweepText string) string {
	t.Helper()
	if err := os.WriteFile(filepath.Join(dir, "base.toml"), []byte(baseRun), 0o644); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "sweep.toml")
	if err := os.WriteFile(path, []byte(sweepText), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func labels(p *Plan) []string {
	var out []string
	for _, e := range p.Runs {
		out = append(out, e.Name()+" "+e.Label())
	}
	return out
}

func samePlanLabels(t *testing.T, got *Plan, want []string) {
	t.Helper()
	g := labels(got)
	if strings.Join(g, "\n") != strings.Join(want, "\n") {
		t.Errorf("plan:\ngot\n\t%s\nwant\n\t%s", strings.Join(g, "\n\t"), strings.Join(want, "\n\t"))
	}
}

// TestExpand checks the canonical order of the expansion: axes crossed,
// the first slowest; the keys of one axis zipped; explicit runs last. The
// expected lists are written out by hand from that rule.
func TestExpand(t *testing.T) {
	for _, tc := range []struct {
		name  string
		sweep string
		want  []string
	}{
		{"cross", `base = "base.toml"
[[axis]]
"model.cell" = ["gru", "lstm"]
[[axis]]
"model.hidden_size" = [8, 16, 32]
`, []string{
			`run-0000 model.cell="gru" model.hidden_size=8`,
			`run-0001 model.cell="gru" model.hidden_size=16`,
			`run-0002 model.cell="gru" model.hidden_size=32`,
			`run-0003 model.cell="lstm" model.hidden_size=8`,
			`run-0004 model.cell="lstm" model.hidden_size=16`,
			`run-0005 model.cell="lstm" model.hidden_size=32`,
		}},
		{"zip", `base = "base.toml"
[[axis]]
"training.learning_rate" = [0.003, 0.01, 1e-4]
"training.seed" = [7, 8, 9]
`, []string{
			`run-0000 training.learning_rate=0.003 training.seed=7`,
			`run-0001 training.learning_rate=0.01 training.seed=8`,
			`run-0002 training.learning_rate=0.0001 training.seed=9`,
		}},
		{"dotted keys and explicit runs", `base = "base.toml"
[[axis]]
model.cell = ["gru", "lstm"]
[[extra]]
model.cell = "rnn"
model.hidden_size = 64
[[extra]]
"data.files" = ["other.txt", "more.txt"]
`, []string{
			`run-0000 model.cell="gru"`,
			`run-0001 model.cell="lstm"`,
			`run-0002 model.cell="rnn" model.hidden_size=64`,
			`run-0003 data.files=["other.txt", "more.txt"]`,
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			sw, err := Load(writeSweep(t, t.TempDir(), tc.sweep))
			if err != nil {
				t.Fatal(err)
			}
			p, err := sw.Plan(context.Background(), false)
			if err != nil {
				t.Fatal(err)
			}
			samePlanLabels(t, p, tc.want)
		})
	}
}

// TestSweepFileErrors checks that a bad sweep file is refused with the
// key (or the problem) named.
func TestSweepFileErrors(t *testing.T) {
	for _, tc := range []struct {
		name, sweep, want string
	}{
		{"unknown key in an axis", "base = \"base.toml\"\n[[axis]]\n\"model.hiden_size\" = [8, 16]\n", `axis 1: unknown run-file key "model.hiden_size"`},
		{"unknown dotted key in an explicit run", "base = \"base.toml\"\n[[extra]]\ntraining.rate = 0.1\n", `extra run 1: unknown run-file key "training.rate"`},
		{"unknown top-level key", "base = \"base.toml\"\naxes = 3\n", `unknown key "axes"`},
		{"zipped lists of two lengths", "base = \"base.toml\"\n[[axis]]\n\"training.seed\" = [1, 2]\n\"training.learning_rate\" = [0.1]\n", "training.seed has 2 values, training.learning_rate has 1"},
		{"not a list", "base = \"base.toml\"\n[[axis]]\n\"training.seed\" = 3\n", "training.seed must be a list of values"},
		{"no base", "[[axis]]\n\"training.seed\" = [1]\n", "base is missing"},
		{"no runs", "base = \"base.toml\"\n", "no runs"},
		{"a value the run file refuses", "base = \"base.toml\"\n[[axis]]\n\"model.cell\" = [\"gru\", \"tree\"]\n", `run 1 (model.cell="tree")`},
		{"the same run twice", "base = \"base.toml\"\n[[axis]]\n\"training.seed\" = [1, 2]\n[[extra]]\n\"training.seed\" = 2\n", "runs 1 and 2 of the expansion are the same run (training.seed=2)"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := writeSweep(t, t.TempDir(), tc.sweep)
			sw, err := Load(path)
			if err == nil {
				_, err = sw.Plan(context.Background(), false)
			}
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("got %v, want an error containing %q", err, tc.want)
			}
			if !strings.Contains(err.Error(), path) {
				t.Errorf("got %q, want the sweep file %s named", err, path)
			}
		})
	}
}

// TestStableNumbering records a plan, marks runs as started, then edits
// the sweep file: appended values and runs get new indices and move no
// old one; a changed value under a started run is refused with its index;
// one under a run that never started frees its index for a new run.
func TestStableNumbering(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	write := func(text string) *Sweep {
		t.Helper()
		sw, err := Load(writeSweep(t, dir, text))
		if err != nil {
			t.Fatal(err)
		}
		return sw
	}
	sw := write(`base = "base.toml"
[[axis]]
"model.cell" = ["gru", "lstm"]
[[axis]]
"model.hidden_size" = [8, 16]
`)
	p, err := sw.Plan(ctx, true)
	if err != nil {
		t.Fatal(err)
	}
	samePlanLabels(t, p, []string{
		`run-0000 model.cell="gru" model.hidden_size=8`,
		`run-0001 model.cell="gru" model.hidden_size=16`,
		`run-0002 model.cell="lstm" model.hidden_size=8`,
		`run-0003 model.cell="lstm" model.hidden_size=16`,
	})
	// Runs 0 and 3 have started: an outcome, a checkpoint.
	if err := sw.writeRecord(p.Runs[0], Record{State: StateDone}); err != nil {
		t.Fatal(err)
	}
	ck := runs.Layout(sw.RunDir(p.Runs[3])).Checkpoints()
	if err := os.MkdirAll(ck, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(ck, "step-000000010.safetensors"), []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}

	// A value appended to the last axis (in the canonical order it would
	// come between old runs) and to the first: new indices only.
	sw = write(`base = "base.toml"
[[axis]]
"model.cell" = ["gru", "lstm", "rnn"]
[[axis]]
"model.hidden_size" = [8, 16, 32]
`)
	p, err = sw.Plan(ctx, true)
	if err != nil {
		t.Fatal(err)
	}
	samePlanLabels(t, p, []string{
		`run-0000 model.cell="gru" model.hidden_size=8`,
		`run-0001 model.cell="gru" model.hidden_size=16`,
		`run-0002 model.cell="lstm" model.hidden_size=8`,
		`run-0003 model.cell="lstm" model.hidden_size=16`,
		`run-0004 model.cell="gru" model.hidden_size=32`,
		`run-0005 model.cell="lstm" model.hidden_size=32`,
		`run-0006 model.cell="rnn" model.hidden_size=8`,
		`run-0007 model.cell="rnn" model.hidden_size=16`,
		`run-0008 model.cell="rnn" model.hidden_size=32`,
	})
	rec, err := ReadPlan(sw.Dir)
	if err != nil || rec == nil || len(rec.Runs) != 9 {
		t.Fatalf("recorded plan: got %v, %v, want the 9 runs", rec, err)
	}

	// 16 changed to 24: runs 1 (never started), 3 (started), 7 and the
	// others with 16 vanish; 3 has a checkpoint, so the sweep is refused.
	sw = write(`base = "base.toml"
[[axis]]
"model.cell" = ["gru", "lstm", "rnn"]
[[axis]]
"model.hidden_size" = [8, 24, 32]
`)
	_, err = sw.Plan(ctx, true)
	if !errors.Is(err, ErrPlanChanged) || !strings.Contains(err.Error(), `run 3 (model.cell="lstm" model.hidden_size=16)`) {
		t.Fatalf("changed value under a started run: got %v, want ErrPlanChanged naming run 3", err)
	}
	if strings.Contains(err.Error(), "run 1 ") || strings.Contains(err.Error(), " 7 (") {
		t.Errorf("got %q, want only the started run named", err)
	}

	// Dropping lstm's 16... is not possible without dropping run 3; drop
	// rnn instead (never started): its indices are free for new runs.
	sw = write(`base = "base.toml"
[[axis]]
"model.cell" = ["gru", "lstm"]
[[axis]]
"model.hidden_size" = [8, 16, 32]
[[extra]]
"model.cell" = "rnn"
"model.hidden_size" = 64
`)
	p, err = sw.Plan(ctx, true)
	if err != nil {
		t.Fatal(err)
	}
	samePlanLabels(t, p, []string{
		`run-0000 model.cell="gru" model.hidden_size=8`,
		`run-0001 model.cell="gru" model.hidden_size=16`,
		`run-0002 model.cell="lstm" model.hidden_size=8`,
		`run-0003 model.cell="lstm" model.hidden_size=16`,
		`run-0004 model.cell="gru" model.hidden_size=32`,
		`run-0005 model.cell="lstm" model.hidden_size=32`,
		`run-0006 model.cell="rnn" model.hidden_size=64`,
	})
	if got := p.Indices(); got != "0-6" {
		t.Errorf("indices: got %q, want 0-6", got)
	}
	if _, err := p.Entry(7); !errors.Is(err, ErrNotInPlan) {
		t.Errorf("index 7: got %v, want ErrNotInPlan", err)
	}
}
