package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/configs"
)

type inspectOptions struct {
	cmdContext
	Path string
	JSON bool
}

func newInspectCmd(d *deps, runF func(*inspectOptions) error) *cobra.Command {
	opts := &inspectOptions{}
	cmd := &cobra.Command{
		Use:   "inspect PATH",
		Short: "Describe a checkpoint or a run directory's checkpoints and check that they are intact",
		Long: `Verify a checkpoint file and describe it: format version, checksum,
training step and epoch, the model (cell, layers, sizes, vocabulary and
tokenizer) and the table of tensors with their types, shapes and sizes.
Given a run directory, describe its newest checkpoint and its best one.

A damaged file is reported on one line and the status is 1.`,
		Args: exactArgs(1, "a checkpoint file or a run directory"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Path = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runInspect(opts)
		},
	}
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the description as JSON")
	return cmd
}

// inspection is the description of one checkpoint (its JSON form is for
// scripts).
type inspection struct {
	Role string `json:"role,omitempty"` // "newest" or "best" in a run directory
	checkpoint.Summary
	Step       *int64               `json:"step,omitempty"`
	Progress   *checkpoint.Progress `json:"progress,omitempty"`
	Model      map[string]any       `json:"model,omitempty"`
	VocabSize  int                  `json:"vocabulary_size,omitempty"`
	Tokenizer  string               `json:"tokenizer,omitempty"`
	Optimizer  string               `json:"optimizer,omitempty"`
	Parameters int64                `json:"parameters,omitempty"`
	Detail     string               `json:"detail,omitempty"` // why the model part is unreadable
}

func runInspect(opts *inspectOptions) error {
	fi, err := os.Stat(opts.Path)
	if err != nil {
		return fmt.Errorf("inspect %s: %w", opts.Path, unwrapPath(err))
	}
	var targets []struct{ role, path string }
	if fi.IsDir() {
		dir := opts.Path
		if sub := runs.Layout(dir).Checkpoints(); isDir(sub) {
			dir = sub
		}
		ents, err := checkpoint.List(dir)
		if err != nil {
			return err
		}
		if len(ents) > 0 {
			targets = append(targets, struct{ role, path string }{"newest", ents[0].Path})
		}
		if p := checkpoint.BestPath(dir); isFile(p) {
			targets = append(targets, struct{ role, path string }{"best", p})
		}
		if len(targets) == 0 {
			return fmt.Errorf("inspect %s: no checkpoints", opts.Path)
		}
	} else {
		targets = append(targets, struct{ role, path string }{"", opts.Path})
	}
	var all []inspection
	var bad []string
	for _, t := range targets {
		in, err := inspectFile(t.path)
		if err != nil {
			return err
		}
		in.Role = t.role
		all = append(all, in)
		if !in.Valid {
			bad = append(bad, fmt.Sprintf("checkpoint %s is damaged: %s", t.path, in.Problem))
		}
	}
	if opts.JSON {
		enc := json.NewEncoder(opts.Out)
		enc.SetIndent("", "  ")
		var v any = all
		if !fi.IsDir() {
			v = all[0]
		}
		if err := enc.Encode(v); err != nil {
			return err
		}
	} else if len(bad) == 0 || fi.IsDir() {
		for i, in := range all {
			if i > 0 {
				fmt.Fprintln(opts.Out)
			}
			printInspection(opts.Out, in)
		}
	}
	if len(bad) > 0 {
		return &exitError{code: exitFailure, err: errors.New(oneLine(strings.Join(bad, "; ")))}
	}
	return nil
}

func isDir(p string) bool {
	fi, err := os.Stat(p)
	return err == nil && fi.IsDir()
}

func isFile(p string) bool {
	fi, err := os.Stat(p)
	return err == nil && fi.Mode().IsRegular()
}

// inspectFile verifies and describes one checkpoint. A damaged file is a
// description with Valid false, not an error.
func inspectFile(path string) (inspection, error) {
	s, err := checkpoint.Inspect(path)
	if err != nil {
		return inspection{}, fmt.Errorf("inspect %s: %w", path, unwrapPath(err))
	}
	in := inspection{Summary: s}
	if !s.Valid {
		// The message names the file already.
		in.Problem = strings.TrimPrefix(oneLine(in.Problem), fmt.Sprintf("load checkpoint %q: ", path))
		return in, nil
	}
	f, err := checkpoint.Load(path)
	if err != nil { // changed since Inspect read it
		in.Valid, in.Problem = false, oneLine(err.Error())
		return in, nil
	}
	if _, ok := f.Meta[checkpoint.MetaModelConfig]; !ok {
		in.Detail = "not a model checkpoint (no model config)"
		return in, nil
	}
	m, err := checkpoint.ModelFromFile(f, path)
	if err != nil {
		in.Detail = oneLine(err.Error())
		return in, nil
	}
	var cfg map[string]any
	if json.Unmarshal([]byte(f.Meta[checkpoint.MetaModelConfig]), &cfg) == nil {
		in.Model = cfg
	}
	in.VocabSize = m.Vocab.Len()
	in.Tokenizer = m.Vocab.Kind().String()
	in.Parameters = int64(m.Net.NumParams())
	if _, ok := f.Meta[checkpoint.MetaTrainer]; ok {
		step := m.Step
		in.Step = &step
	}
	if p, err := checkpoint.ReadProgress(f); err == nil {
		in.Progress = &p
	}
	if rc := f.Meta[checkpoint.MetaRunConfig]; rc != "" {
		if r, err := configs.Parse(path, []byte(rc), nil); err == nil {
			in.Optimizer = r.Training.Optimizer
		}
	}
	return in, nil
}

func printInspection(w io.Writer, in inspection) {
	title := "checkpoint"
	if in.Role != "" {
		title = in.Role + " checkpoint"
	}
	fmt.Fprintf(w, "%s %s\n", title, in.Path)
	if !in.Valid {
		fmt.Fprintf(w, "  DAMAGED: %s\n", in.Problem)
		return
	}
	sum := in.Checksum
	if len(sum) > 16 {
		sum = sum[:16] + "…"
	}
	fmt.Fprintf(w, "  format version %d, checksum verified (SHA-256 %s)\n", in.FormatVersion, sum)
	if in.Detail != "" {
		fmt.Fprintf(w, "  %s\n", in.Detail)
	}
	if in.Step != nil {
		fmt.Fprintf(w, "  step %s", thousands(*in.Step))
		if p := in.Progress; p != nil {
			fmt.Fprintf(w, ", %d epochs completed", p.Epoch)
			if p.HaveBest {
				fmt.Fprintf(w, "; best validation %.4f bits per character at step %s", p.BestBitsPerChar, thousands(p.BestStep))
			}
			if p.Finished {
				fmt.Fprintf(w, "; finished: %s", p.FinishReason)
			}
		}
		fmt.Fprintln(w)
	}
	if c := in.Model; c != nil {
		fmt.Fprintf(w, "  model: %v, %v layer(s) of %v units, embedding %v", c["cell"], c["layers"], c["hidden_size"], c["embedding_size"])
		if ps, ok := c["projection_size"].(float64); ok && ps > 0 {
			fmt.Fprintf(w, ", projection %v", ps)
		}
		fmt.Fprintf(w, "; %s parameters; vocabulary of %s (%s tokenizer)\n", thousands(in.Parameters), thousands(int64(in.VocabSize)), in.Tokenizer)
	}
	if in.Optimizer != "" {
		fmt.Fprintf(w, "  optimizer: %s", in.Optimizer)
		if p := in.Progress; p != nil && p.LearningRateScale != 1 {
			fmt.Fprintf(w, " (learning rate scaled by %g after %d divergence(s))", p.LearningRateScale, p.DivergencesTotal)
		}
		fmt.Fprintln(w)
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "  name\tdtype\tshape\tbytes")
	for _, t := range in.Tensors {
		fmt.Fprintf(tw, "  %s\t%v\t%v\t%s\n", t.Name, t.DType, t.Shape, thousands(t.Bytes))
	}
	tw.Flush()
	for _, fam := range []string{"model", "optim", "state", "other"} {
		if b, ok := in.Bytes[fam]; ok {
			fmt.Fprintf(w, "  %s: %s elements, %s bytes\n", fam, thousands(in.Elements[fam]), thousands(b))
		}
	}
}
