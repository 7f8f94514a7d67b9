package main

import (
	"strings"

	"github.com/spf13/cobra"

	"weft/configs"
)

// addCompletions teaches the shells completion of what weft's arguments
// name: run directories for --run, run-file keys for --set, and preset
// names for 'weft config new'. 'weft completion bash|zsh|fish' writes the
// scripts (cobra's own command).
func addCompletions(root *cobra.Command) {
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		if f := c.Flags().Lookup("run"); f != nil {
			c.MarkFlagDirname("run")
		}
		if f := c.Flags().Lookup("set"); f != nil {
			c.RegisterFlagCompletionFunc("set", completeKeys)
		}
		for _, sub := range c.Commands() {
			walk(sub)
		}
	}
	walk(root)
}

// completeKeys offers the run-file keys as "section.key=".
func completeKeys(_ *cobra.Command, _ []string, prefix string) ([]string, cobra.ShellCompDirective) {
	var out []string
	for _, k := range configs.Keys() {
		if strings.HasPrefix(k, prefix) {
			out = append(out, k+"=")
		}
	}
	return out, cobra.ShellCompDirectiveNoSpace
}

// completePresets offers the preset names to 'weft config new'.
func completePresets(_ *cobra.Command, args []string, _ string) ([]string, cobra.ShellCompDirective) {
	if len(args) > 0 {
		return nil, cobra.ShellCompDirectiveNoFileComp
	}
	var out []string
	for _, p := range configs.Presets() {
		out = append(out, p.Name+"\t"+p.Summary)
	}
	return out, cobra.ShellCompDirectiveNoFileComp
}
