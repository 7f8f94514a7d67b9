package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
)

type inspectOptions struct {
	cmdContext
	Path       string // a positional checkpoint file (or, deprecated, run directory)
	Run        string
	Checkpoint string
	JSON       bool
}

func newInspectCmd(d *deps, runF func(*inspectOptions) error) *cobra.Command {
	opts := &inspectOptions{}
	cmd := &cobra.Command{
		Use:   "inspect (--run DIR | --checkpoint FILE | FILE)",
		Short: "Describe a checkpoint or a run directory's checkpoints and check that they are intact",
		Long: `Verify a checkpoint file and describe it: format version, checksum,
training step and epoch, the model (cell, layers, sizes, vocabulary and
tokenizer) and the table of tensors with their types, shapes and sizes.
Given a run directory, describe its newest checkpoint and its best one.

A damaged file is reported on one line and the status is 1.`,
		Example: "  weft inspect --run runs/night",
		Args:    rangeArgs(0, 1, "at most one checkpoint file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if len(args) == 1 {
				opts.Path = args[0]
			}
			if runF != nil {
				return runF(opts)
			}
			return runInspect(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory whose newest and best checkpoints to describe")
	cmd.Flags().StringVar(&opts.Checkpoint, "checkpoint", "", "checkpoint file to describe")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the description as JSON")
	return cmd
}

func runInspect(opts *inspectOptions) error {
	path := opts.Path
	given := 0
	for _, p := range []string{opts.Path, opts.Run, opts.Checkpoint} {
		if p != "" {
			given++
			path = p
		}
	}
	switch {
	case given != 1:
		return usagef("give one of --run DIR, --checkpoint FILE or a checkpoint file")
	case opts.Path != "" && isDir(opts.Path):
		deprecated(opts.deps, "'weft inspect DIR'", "'weft inspect --run DIR'")
	}
	all, err := runs.Inspect(path)
	if err != nil {
		return err
	}
	var bad []string
	for _, in := range all {
		switch {
		case in.Valid:
		case strings.HasPrefix(in.Problem, "not a safetensors file"):
			bad = append(bad, fmt.Sprintf("%s is not a checkpoint (%s)", in.Path, in.Problem))
		default:
			bad = append(bad, fmt.Sprintf("checkpoint %s is damaged: %s", in.Path, in.Problem))
		}
	}
	single := len(all) == 1 && all[0].Role == ""
	if opts.JSON {
		enc := json.NewEncoder(opts.Out)
		enc.SetIndent("", "  ")
		var v any = all
		if single {
			v = all[0]
		}
		if err := enc.Encode(v); err != nil {
			return err
		}
	} else if len(bad) == 0 || !single {
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

func printInspection(w io.Writer, in runs.Inspection) {
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
