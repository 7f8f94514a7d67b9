package main

import (
	"fmt"
	"path/filepath"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
)

type runsOptions struct {
	cmdContext
	Root  string
	Depth int
	JSON  bool
}

func newRunsCmd(d *deps, runF func(*runsOptions) error) *cobra.Command {
	opts := &runsOptions{}
	cmd := &cobra.Command{
		Use:   "runs [FOLDER]",
		Short: "List the run directories under a folder with their state, step and best validation",
		Long: `List the run directories under FOLDER (default: runs), each with its state,
its newest step, its best validation bits per character and when it last
changed. The states: training (a process is at work on it), finished (a
budget or early stopping ended it), interrupted (a signal stopped it after
saving: run the same command to go on), failed (it stopped with an error,
shown with --json), stale (it was training when its process died: run it
again to resume from its newest checkpoint) and prepared (never trained).`,
		Example: "  weft runs",
		Args:    rangeArgs(0, 1, "at most one folder"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Root = "runs"
			if len(args) == 1 {
				opts.Root = args[0]
			}
			if runF != nil {
				return runF(opts)
			}
			return runRuns(opts)
		},
	}
	cmd.Flags().IntVar(&opts.Depth, "depth", 3, "how many folder levels below FOLDER to look")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print one JSON object per run")
	return cmd
}

func runRuns(opts *runsOptions) error {
	if !isDir(opts.Root) {
		return fmt.Errorf("folder %s: not a directory", opts.Root)
	}
	dirs, err := runs.Find(opts.Root, opts.Depth)
	if err != nil {
		return err
	}
	var all []runs.Summary
	for _, dir := range dirs {
		s, err := runs.Describe(dir)
		if err != nil {
			return err
		}
		all = append(all, s)
	}
	if opts.JSON {
		for _, s := range all {
			if err := writeJSONLine(opts.Out, s); err != nil {
				return err
			}
		}
		return nil
	}
	if len(all) == 0 {
		fmt.Fprintf(opts.Out, "no run directories under %s\n", opts.Root)
		return nil
	}
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "run\tstate\tstep\tbest validation (bits/char)\tlast change")
	for _, s := range all {
		rel, err := filepath.Rel(opts.Root, s.Dir)
		if err != nil {
			rel = s.Dir
		}
		best := "-"
		if finite(float64(s.BestBitsPerChar)) {
			best = fmt.Sprintf("%.4f at step %s", s.BestBitsPerChar, thousands(s.BestStep))
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", rel, s.State, thousands(s.Step), best, s.LastChange.Local().Format(time.DateTime))
	}
	return tw.Flush()
}
