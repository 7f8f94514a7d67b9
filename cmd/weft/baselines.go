package main

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/data"
	"weft/eval"
)

// The baselines folder of a run directory holds the fitted baselines as
// eval.Ladder saves them (the n-gram counts at the largest configured
// order, from which every n-gram and Markov model is rebuilt in
// milliseconds, and one file per hidden Markov model) and a manifest saying
// what they were fitted on, so that a changed corpus or setting refits them.
const (
	baselineManifest = "manifest.json"
	baselineCounts   = "ngram-counts.bin" // as eval.Ladder.Save names it
)

type baselineManifestJSON struct {
	Format      string `json:"format"` // "weft-baselines"
	Version     int    `json:"version"`
	TrainSHA256 string `json:"train_sha256"` // of the training token ids
	VocabSize   int    `json:"vocabulary_size"`
	Boundary    int    `json:"boundary"`
	Settings    string `json:"settings"` // the [evaluation] keys that shape the fit
}

// baselines is the fitted baseline ladder of a run.
type baselines struct {
	ladder *eval.Ladder
	cands  []*candidate
}

// fitBaselines builds the configured ladder, loading it from dir (a run's
// baselines folder; "" for none) when it was fitted there on the same
// training split with the same settings, and saving it there otherwise. A
// damaged cache is refitted, never trusted.
func fitBaselines(ctx context.Context, cfg eval.Config, ds *data.Dataset, dir string, prog *stageProgress) (*baselines, error) {
	train := ds.Train.Tokens
	if len(train) == 0 {
		return nil, errors.New("the training split is empty")
	}
	V, boundary := ds.Vocab.Len(), ds.Vocab.Boundary()
	man := baselineManifestJSON{Format: "weft-baselines", Version: 1, TrainSHA256: tokensSHA256(train),
		VocabSize: V, Boundary: boundary, Settings: fitSettings(cfg)}
	var ladder *eval.Ladder
	if dir != "" {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return nil, fmt.Errorf("baselines folder %s: %w", dir, unwrapPath(err))
		}
		var old baselineManifestJSON
		if b, err := os.ReadFile(filepath.Join(dir, baselineManifest)); err == nil && json.Unmarshal(b, &old) == nil && old == man {
			l, err := eval.LoadLadder(dir, cfg)
			if err == nil {
				ladder = l
			} else {
				prog.Status(fmt.Sprintf("cached baselines unusable (%v); fitting them again", err))
			}
		}
	}
	if ladder == nil {
		l, err := eval.FitLadder(ctx, train, V, boundary, cfg, prog.Func())
		if err != nil {
			return nil, err
		}
		ladder = l
		if dir != "" {
			// The manifest goes last: a crash before it leaves a cache
			// that the next run refits.
			os.Remove(filepath.Join(dir, baselineManifest))
			if err := ladder.Save(dir); err != nil {
				return nil, err
			}
			if err := writeJSONAtomic(filepath.Join(dir, baselineManifest), man); err != nil {
				return nil, err
			}
		}
	}
	prog.finish()
	bl := &baselines{ladder: ladder}
	for _, m := range ladder.Models() {
		c := &candidate{name: m.Name(), kind: "baseline", model: m}
		if k, ok := m.(eval.Kinder); ok {
			c.kind = k.Kind()
		}
		if sb, ok := m.(eval.StateBitser); ok {
			c.stateBits = sb.StateBits()
		}
		bl.cands = append(bl.cands, c)
	}
	return bl, nil
}

// fitSettings are the [evaluation] keys a fitted ladder depends on.
func fitSettings(cfg eval.Config) string {
	b, _ := json.Marshal(struct {
		Orders, Markov, HMM []int
		Smoothers           []string
		AddK, Tol           float64
		Iter, Tokens        int
		Seed                uint64
	}{cfg.NgramOrders, cfg.MarkovOrders, cfg.HMMStates, cfg.NgramSmoothers, cfg.AddK, cfg.HMMTolerance,
		cfg.HMMMaxIterations, cfg.HMMMaxTokens, cfg.Seed})
	return string(b)
}

func tokensSHA256(tokens []int) string {
	h := sha256.New()
	var buf [8]byte
	for _, t := range tokens {
		binary.LittleEndian.PutUint64(buf[:], uint64(t))
		h.Write(buf[:])
	}
	return hex.EncodeToString(h.Sum(nil))
}

type baselinesOptions struct {
	cmdContext
	Target string // a run file or a run directory
	Run    string
	Set    []string
	JSON   bool
}

func newBaselinesCmd(d *deps, runF func(*baselinesOptions) error) *cobra.Command {
	opts := &baselinesOptions{}
	cmd := &cobra.Command{
		Use:   "baselines CONFIG-or-RUN",
		Short: "Fit the n-gram, Markov-chain and hidden-Markov baselines and score them on validation",
		Long: `Fit the baseline ladder of the run's [evaluation] section on the training split:
n-gram models at every configured order with every configured smoother
(maximum likelihood, add-k, Witten-Bell, absolute discounting, Kneser-Ney,
modified Kneser-Ney), fixed-order Markov chains and hidden Markov models
trained by Baum-Welch. Prints their validation bits per character (the test
split is left for 'weft eval') and caches them in the run directory's
baselines folder, where 'weft eval' and 'weft score' find them.

The argument is a run directory, or a run file with --run DIR.`,
		Args: exactArgs(1, "a run file or a run directory"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Target = args[0]
			if runF != nil {
				return runF(opts)
			}
			return runBaselines(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", "", "run directory to cache the baselines in (with a run file)")
	cmd.Flags().BoolVar(&opts.JSON, "json", false, "print the validation scores as JSON")
	addSetFlag(cmd, &opts.Set)
	return cmd
}

// resolveTarget reads the run of a "CONFIG-or-RUN" argument: a run
// directory's saved run file, or the given run file with runFlag as its
// directory ("" for none).
func resolveTarget(target, runFlag string, sets []string) (*configs.Run, string, error) {
	fi, err := os.Stat(target)
	if err != nil {
		return nil, "", fmt.Errorf("%s: %w", target, unwrapPath(err))
	}
	if fi.IsDir() {
		if runFlag != "" && filepath.Clean(runFlag) != filepath.Clean(target) {
			return nil, "", usagef("give either a run directory or --run, not both")
		}
		path := filepath.Join(target, runConfigFile)
		if _, err := os.Stat(path); err != nil {
			return nil, "", fmt.Errorf("%s is not a run directory (no %s): train or prepare into it first, or pass a run file", target, runConfigFile)
		}
		r, err := configs.Load(path, sets)
		return r, target, err
	}
	r, err := configs.Load(target, sets)
	return r, runFlag, err
}

func runBaselines(opts *baselinesOptions) error {
	r, dir, err := resolveTarget(opts.Target, opts.Run, opts.Set)
	if err != nil {
		return err
	}
	var rd *runDir
	if dir != "" {
		if rd, err = openRunDir(dir); err != nil {
			return err
		}
		defer rd.Close()
	}
	ds, err := prepareData(opts.cmdContext, r, rd)
	if err != nil {
		return err
	}
	prog := newStageProgress(opts.deps, opts.JSON)
	blDir := ""
	if rd != nil {
		blDir = rd.file(baselinesDir)
	}
	bl, err := fitBaselines(opts.ctx, r.Evaluation.Config, ds, blDir, prog)
	if err != nil {
		return err
	}
	if len(bl.cands) == 0 {
		return fmt.Errorf("no baselines configured: set evaluation.ngram_orders and ngram_smoothers, markov_orders or hmm_states")
	}
	var rows []eval.Result
	score := prog.Func()
	for i, c := range bl.cands {
		if score != nil {
			score("score baselines on validation", i, len(bl.cands))
		}
		lp := make([]float64, len(ds.Validation.Tokens))
		if err := c.model.LogProbs(opts.ctx, lp, ds.Validation.Tokens); err != nil {
			return fmt.Errorf("score %s: %w", c.name, err)
		}
		res := eval.NewResult(c.name, c.kind, "validation", lp, int(ds.Validation.Characters))
		res.StateBits = c.stateBits
		rows = append(rows, res)
	}
	if score != nil {
		score("score baselines on validation", len(bl.cands), len(bl.cands))
	}
	prog.finish()
	sortBestFirst(rows)
	if opts.JSON {
		enc := json.NewEncoder(opts.Out)
		enc.SetIndent("", "  ")
		return enc.Encode(rows)
	}
	fmt.Fprintf(opts.Out, "baselines fitted on %s training tokens; validation split, best first\n\n", thousands(int64(len(ds.Train.Tokens))))
	tw := tabwriter.NewWriter(opts.Out, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "model\tkind\tbits/char\tbits/token\tperplexity")
	for _, res := range rows {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", res.Model, res.Kind, num(res.BitsPerChar, 3), num(res.BitsPerToken, 3), num(res.Perplexity, 2))
	}
	tw.Flush()
	if rd != nil {
		fmt.Fprintf(opts.Out, "\ncached in %s\n", blDir)
	}
	return nil
}
