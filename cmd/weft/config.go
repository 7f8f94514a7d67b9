package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/data"
)

type configNewOptions struct {
	*deps
	Preset string
	List   bool
	// The sizing rule's inputs (--fit and what goes with it).
	Fit       time.Duration
	Corpus    []string
	Cores     int
	Tokenizer string
	Speed     float64

	presetGiven bool
	ctx         context.Context // the command's, cancelled by the stopping signals
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
			strings.Join(names, "\n") + "\n\nWithout PRESET, " + configs.DefaultPreset + " is written.\n\n" +
			"With --fit DURATION --corpus FILES, the run file is sized for that time budget,\n" +
			"that corpus and this machine instead: the largest LSTM that trains on at least 4\n" +
			"tokens per parameter in the budget and has at most 4 parameters per corpus\n" +
			"token, dropout by the expected passes over the corpus, and a cosine schedule\n" +
			"annealing to the deadline (a constant rate under 8 M expected tokens). Each\n" +
			"value says why in a comment; tokens per parameter, expected passes and speed\n" +
			"are printed on standard error. The speeds are scaled from the reference model\n" +
			"(lstm 1x256), which --fit times here on --cores threads for about a second, as\n" +
			"weft bench does; --speed gives its tokens/s instead (time it on the machine\n" +
			"and load the run will have).",
		Example: "  weft config new char-small > night.toml\n" +
			"  weft config new --fit 8h --corpus books/ > night.toml",
		Args:              rangeArgs(0, 1, "at most one preset name"),
		ValidArgsFunction: completePresets,
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.ctx = cmd.Context()
			opts.Preset = configs.DefaultPreset
			if len(args) == 1 {
				opts.Preset, opts.presetGiven = args[0], true
			}
			if runF != nil {
				return runF(opts)
			}
			return runConfigNew(opts)
		},
	}
	f := cmd.Flags()
	f.BoolVar(&opts.List, "list", false, "list the presets instead")
	f.DurationVar(&opts.Fit, "fit", 0, "size the run file for this time budget (e.g. 8h) instead of writing a preset")
	f.StringArrayVar(&opts.Corpus, "corpus", nil, "with --fit: the corpus files, folders or globs (repeatable)")
	f.IntVar(&opts.Cores, "cores", runtime.NumCPU(), "with --fit: cores the run will train on")
	f.StringVar(&opts.Tokenizer, "tokenizer", "char", "with --fit: \"char\" or \"word\"")
	f.Float64Var(&opts.Speed, "speed", 0, "with --fit: tokens/s of the reference model (lstm 1x256) on the run's cores, as weft bench measures it (0: time it here, about a second)")
	return cmd
}

func runConfigNew(opts *configNewOptions) error {
	if opts.Fit != 0 || len(opts.Corpus) > 0 {
		return runConfigFit(opts)
	}
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

// runConfigFit writes a run file sized by configs.Size for the budget, the
// corpus (prepared as the run would, to count its training tokens and
// vocabulary) and the cores.
func runConfigFit(opts *configNewOptions) error {
	switch {
	case opts.presetGiven || opts.List:
		return usagef("--fit writes a sized run file: give no preset and no --list with it")
	case opts.Fit <= 0:
		return usagef("--fit must be a positive duration such as 8h, got %v", opts.Fit)
	case len(opts.Corpus) == 0:
		return usagef("--fit needs --corpus FILES: the rule sizes the model to the corpus")
	case opts.Cores < 1:
		return usagef("--cores must be at least 1, got %d", opts.Cores)
	case opts.Tokenizer != "char" && opts.Tokenizer != "word":
		return usagef("--tokenizer must be \"char\" or \"word\" with --fit, got %q", opts.Tokenizer)
	case opts.Speed < 0 || math.IsNaN(opts.Speed) || math.IsInf(opts.Speed, 0):
		return usagef("--speed must be 0 (measure it here) or a positive number of tokens/s, got %v", opts.Speed)
	}
	files := make([]string, len(opts.Corpus))
	for i, f := range opts.Corpus {
		abs, err := filepath.Abs(f)
		if err != nil {
			return fmt.Errorf("--corpus %s: %w", f, err)
		}
		files[i] = abs
	}
	dc := configs.Default().Data
	dc.Files, dc.Tokenizer = files, opts.Tokenizer
	if opts.Tokenizer == "word" {
		dc.MaxVocabulary = 10000
	}
	// The corpus is encoded into a temporary cache folder, so that a
	// corpus larger than memory is spooled and mapped, not held.
	tmp, err := os.MkdirTemp("", "weft-fit-*")
	if err != nil {
		return fmt.Errorf("--fit: temporary folder: %w", err)
	}
	defer os.RemoveAll(tmp)
	ctx := opts.ctx
	if ctx == nil {
		ctx = context.Background()
	}
	ds, err := data.PrepareEnv(ctx, dc, data.Env{CacheDir: tmp, Stdin: opts.In})
	if err != nil {
		return err
	}
	defer ds.Close()
	speed := opts.Speed
	if speed == 0 {
		if speed, err = configs.ReferenceSpeed(ctx, opts.Cores); err != nil {
			return fmt.Errorf("--fit: timing the reference model: %w", err)
		}
		fmt.Fprintf(opts.Err, "measured the reference model (lstm 1×256, as weft bench trains it) at %s tokens/s on %s; --speed skips this\n",
			thousands(int64(speed)), counted(opts.Cores, "thread"))
	}
	fit, err := configs.Size(configs.FitInput{Budget: opts.Fit, CorpusTokens: int64(ds.Train.Tokens.Len()), VocabSize: ds.Vocab.Len(),
		Tokenizer: opts.Tokenizer, Cores: opts.Cores, TokensPerSecond: speed})
	if err != nil {
		return usagef("--fit: %v", err)
	}
	if _, err := io.WriteString(opts.Out, fit.RunFile(files, opts.Tokenizer, opts.Fit)); err != nil {
		return err
	}
	fmt.Fprintf(opts.Err, "sized for %v on %s: lstm %d×%d, %s parameters; expected %s tokens/s, %s training tokens, %.1f tokens per parameter, %.1f passes over the %s training tokens\n",
		opts.Fit, counted(opts.Cores, "core"), fit.Layers, fit.Hidden, thousands(fit.Params), thousands(int64(fit.TokensPerSecond)), thousands(fit.ExpectedTokens),
		fit.TokensPerParam, fit.Epochs, thousands(int64(ds.Train.Tokens.Len())))
	return nil
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

// counted writes n and the unit, the unit in the plural but for one.
func counted(n int, unit string) string {
	if n == 1 {
		return "1 " + unit
	}
	return fmt.Sprintf("%d %ss", n, unit)
}
