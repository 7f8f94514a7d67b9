// This file holds the helpers several verbs share.

package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/configs"
	"weft/data"
	"weft/data/atomicfile"
	"weft/eval"
	"weft/rnn/linalg"

	"github.com/spf13/cobra"
)

// openRunDir opens and locks a run directory for a verb (runs.Open), with
// the flag a user must give when there is none.
func openRunDir(dir string) (*runs.Dir, error) {
	if dir == "" {
		return nil, usagef("--run DIR is required")
	}
	return runs.Open(dir)
}

// prepareData runs the corpus pipeline of a run, caching it in the run
// directory when there is one (runs.Prepare).
func prepareData(cc cmdContext, r *configs.Run, rd *runs.Dir) (*data.Dataset, error) {
	return runs.Prepare(cc.ctx, r, rd, cc.In)
}

// unwrapPath drops the *os.PathError wrapper when the caller names the path
// itself, so messages do not repeat it.
func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// writeFileAtomic writes b to path through atomicfile, naming path in the
// error.
func writeFileAtomic(path string, b []byte) error {
	if err := atomicfile.WriteBytes(path, b); err != nil {
		return fmt.Errorf("write %s: %w", path, unwrapPath(err))
	}
	return nil
}

// cmdContext is what every run function gets: the context (cancelled by
// the stopping signals) and the injected streams.
type cmdContext struct {
	ctx context.Context
	*deps
}

// writeJSON writes v to w as JSON indented by two spaces, the form of
// every --json output.
func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// thousands formats n with commas between groups of three digits.
func thousands(n int64) string { return eval.Thousands(n) }

// addThreadsFlag adds --threads with its one meaning on every verb that
// computes: the threads the command computes with (def when not given).
// Results do not depend on it.
func addThreadsFlag(cmd *cobra.Command, dst *int, def int, how string) {
	cmd.Flags().IntVar(dst, "threads", def, "threads to compute with"+how+"; the results do not depend on it")
}

// usePool gives m a pool of n threads and returns the function that
// closes it.
func usePool(m *checkpoint.Model, n int) (func(), error) {
	if n < 1 {
		return nil, usagef("--threads must be at least 1, got %d", n)
	}
	if n == 1 {
		return func() {}, nil
	}
	p := linalg.NewPool(n)
	m.Net.SetPool(p)
	return func() { m.Net.SetPool(nil); p.Close() }, nil
}

// loadRunModel loads the model of a run directory or a checkpoint file, as
// --run and --checkpoint say.
func loadRunModel(run, which string) (*checkpoint.Model, error) {
	switch {
	case run == "" && which == "":
		return nil, usagef("give --run DIR or --checkpoint FILE")
	case run == "" || strings.ContainsAny(which, `/\`):
		if fi, err := os.Stat(which); err == nil && fi.IsDir() {
			return nil, usagef("--checkpoint %s is a directory; give a run directory with --run, or a checkpoint file", which)
		}
		return checkpoint.LoadModel(which)
	}
	return runs.OpenModel(run, which)
}

// round6 rounds to 6 decimals, so that printed numbers do not depend on
// the last bits of a machine's arithmetic.
func round6(x float64) float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return x
	}
	return math.Round(x*1e6) / 1e6
}

// writeJSONLine writes v as one line of JSON, without escaping HTML
// characters.
func writeJSONLine(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		if errors.Is(err, io.ErrShortWrite) {
			return err
		}
		return fmt.Errorf("write JSON: %w", err)
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// deprecated warns, on one line, that an old form of a command still works
// for this release and names the form to use instead.
func deprecated(d *deps, old, use string) {
	fmt.Fprintf(d.Err, "weft: %s is deprecated and goes in the next release; use %s\n", old, use)
}

func isDir(p string) bool {
	fi, err := os.Stat(p)
	return err == nil && fi.IsDir()
}
