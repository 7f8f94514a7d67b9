package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"weft/checkpoint/onnx"
)

type exportOptions struct {
	cmdContext
	Run        string
	Checkpoint string
	Format     string
	Output     string
}

func newExportCmd(d *deps, runF func(*exportOptions) error) *cobra.Command {
	opts := &exportOptions{}
	cmd := &cobra.Command{
		Use:     "export (--run DIR | --checkpoint FILE) -o FILE",
		Example: "  weft export --run runs/demo -o demo.onnx",
		Short:   "Write a trained model as an ONNX model for other runtimes",
		Long: `Write a trained model in a format other programs run: --format onnx (the
only one for now) writes an ONNX model (IR version 8, operator set 14) that
any ONNX runtime can score text and sample with. The model is the best
checkpoint of --run DIR, or the one --checkpoint names, as for 'weft sample'.

The ONNX model takes token ids [batch, sequence] and the incoming state of
each layer (zeros at the start of a document) and gives the log-probabilities
(nats) of the next token at every position, those of the first token, and
the outgoing state; its metadata carries the vocabulary and the tokenizer
settings. The README's "Deploying a model" section names every input and
output and shows a runtime scoring a line.

The file is written through a temporary file and a rename: an existing file
at -o is replaced only once the new one is complete.`,
		Args: exactArgs(0, "no arguments"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if opts.Format != "onnx" {
				return usagef("--format must be onnx, got %q", opts.Format)
			}
			if opts.Output == "" {
				return usagef("give -o FILE, the file to write")
			}
			if runF != nil {
				return runF(opts)
			}
			return runExport(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory whose model to export")
	f.StringVar(&opts.Checkpoint, "checkpoint", "", `checkpoint: with --run "best" (default), "latest", a step or a file name; else a file`)
	f.StringVar(&opts.Format, "format", "onnx", "format to write: onnx")
	f.StringVarP(&opts.Output, "output", "o", "", "file to write (required)")
	return cmd
}

func runExport(opts *exportOptions) error {
	m, err := loadRunModel(opts.Run, opts.Checkpoint)
	if err != nil {
		return err
	}
	b, err := onnx.EncodeCheckpoint(m, version)
	if err != nil {
		return fmt.Errorf("export %s: %w", m.Path, err)
	}
	if err := writeFileAtomic(opts.Output, b); err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "wrote %s: %s from %s, vocabulary of %s (%s tokenizer), ONNX IR version %d, operator set %d, %s bytes\n",
		opts.Output, m.Net.Name(), m.Path, thousands(int64(m.Vocab.Len())), m.Vocab.Kind(), onnx.IRVersion, onnx.OpsetVersion, thousands(int64(len(b))))
	return nil
}
