package main

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"

	"weft/configs"
)

type configNewOptions struct {
	*deps
	Preset string
	List   bool
}

type configShowOptions struct {
	*deps
	File string
	Set  []string
}

func newConfigCmd(d *deps, runNew func(*configNewOptions) error) *cobra.Command {
	cmd := &cobra.Command{
		Use:   "config",
		Short: "Write a starter run file or print a resolved one",
	}
	cmd.AddCommand(newConfigNewCmd(d, runNew), newConfigShowCmd(d, nil))
	return cmd
}

func newConfigNewCmd(d *deps, runF func(*configNewOptions) error) *cobra.Command {
	opts := &configNewOptions{deps: d}
	var names []string
	for _, p := range configs.Presets() {
		names = append(names, fmt.Sprintf("  %-11s %s", p.Name, p.Summary))
	}
	cmd := &cobra.Command{
		Use:   "new [PRESET]",
		Short: "Write a commented starter run file to standard output",
		Long: "Write a commented starter run file to standard output.\n\nPresets:\n" +
			strings.Join(names, "\n") + "\n\nWithout PRESET, " + configs.DefaultPreset + " is written.",
		Example:           "  weft config new char-small > night.toml",
		Args:              rangeArgs(0, 1, "at most one preset name"),
		ValidArgsFunction: completePresets,
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.Preset = configs.DefaultPreset
			if len(args) == 1 {
				opts.Preset = args[0]
			}
			if runF != nil {
				return runF(opts)
			}
			return runConfigNew(opts)
		},
	}
	cmd.Flags().BoolVar(&opts.List, "list", false, "list the presets instead")
	return cmd
}

func runConfigNew(opts *configNewOptions) error {
	if opts.List {
		for _, p := range configs.Presets() {
			fmt.Fprintf(opts.Out, "%-11s %s\n", p.Name, p.Summary)
		}
		return nil
	}
	p, err := configs.LookupPreset(opts.Preset)
	if err != nil {
		return &usageError{err}
	}
	_, err = opts.Out.Write(p.Text)
	return err
}

func newConfigShowCmd(d *deps, runF func(*configShowOptions) error) *cobra.Command {
	opts := &configShowOptions{deps: d}
	cmd := &cobra.Command{
		Use:     "show FILE",
		Example: "  weft config show night.toml",
		Short:   "Print the fully resolved run file: defaults, the file and overrides applied",
		Args:    exactArgs(1, "one run file"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.File = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runConfigShow(opts)
		},
	}
	addSetFlag(cmd, &opts.Set)
	return cmd
}

func runConfigShow(opts *configShowOptions) error {
	r, err := configs.Load(opts.File, opts.Set)
	if err != nil {
		return err
	}
	b, err := configs.Encode(r)
	if err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "# resolved from %s\n", opts.File)
	_, err = opts.Out.Write(b)
	return err
}

// addSetFlag adds the repeatable --set section.key=value override.
func addSetFlag(cmd *cobra.Command, dst *[]string) {
	cmd.Flags().StringArrayVar(dst, "set", nil, "override a run-file key, as section.key=value (repeatable)")
}
