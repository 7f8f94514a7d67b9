package main

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/data"
	"weft/data/demo"
)

const demoCorpusName = "port-averly-log.txt"

type demoOptions struct {
	cmdContext
	Run     string // the run directory, which holds the generated corpus and run file too
	Dir     string // deprecated: the folder holding the corpus, run file and run directory DIR/run
	For     time.Duration
	Seed    uint64
	Size    int
	Restart bool
}

func newDemoCmd(d *deps, runF func(*demoOptions) error) *cobra.Command {
	opts := &demoOptions{}
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run the whole job on the built-in demo corpus: generate, train, fit baselines, compare",
		Long: `Generate the built-in demo corpus (the invented radio log of the dispatch desk
of Port Averly, a harbour of our own: about 2 MB, seeded), train a small LSTM
on it for a bounded time, fit the baseline ladder on the same training split,
and compare everything on the held-out test split, including the characters
that only long-range context predicts (call signs repeated 43-72 characters
after they first appear, the separator that closes a counted list, closing
brackets and quotes). Run it again to resume training where it stopped.`,
		Example: "  weft demo\n  weft demo --for 20m",
		Args:    exactArgs(0, "no arguments"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if opts.For <= 0 {
				return usagef("--for must be a positive duration, got %v", opts.For)
			}
			if runF != nil {
				return runF(opts)
			}
			return runDemo(opts)
		},
	}
	cmd.Flags().StringVar(&opts.Run, "run", filepath.Join("runs", "demo"), "run directory of the demo (the corpus and run file are written there too)")
	cmd.Flags().StringVar(&opts.Dir, "dir", "", "folder for the demo corpus and run file, with the run in DIR/run")
	cmd.Flags().MarkDeprecated("dir", "it goes in the next release; use --run DIR")
	cmd.Flags().DurationVar(&opts.For, "for", 3*time.Minute, "training time budget")
	cmd.Flags().Uint64Var(&opts.Seed, "seed", 1, "seed of the corpus generator")
	cmd.Flags().IntVar(&opts.Size, "size", demo.Size, "size of the demo corpus in bytes")
	cmd.Flags().BoolVar(&opts.Restart, "restart", false, "train from scratch instead of resuming an earlier demo run")
	return cmd
}

// demoRun is the run file of the demo: a one-layer LSTM over characters.
func demoRun(corpus string, size int) configs.Run {
	r := configs.Default()
	r.Data.Files = []string{corpus}
	r.Data.Tokenizer = "char"
	r.Model.Cell = "lstm"
	r.Model.Layers = 1
	r.Model.HiddenSize = 256
	r.Model.EmbeddingSize = 32
	r.Training.Optimizer = "adam"
	r.Training.LearningRate = 0.003
	r.Training.BatchSize = 32
	r.Training.UnrollSteps = 100
	r.Training.ClipNorm = 5
	r.Evaluation.EverySteps = 200
	// A compact ladder: the orders and smoothers worth a row, not all.
	r.Evaluation.NgramOrders = []int{2, 3, 5, 8}
	r.Evaluation.NgramSmoothers = []string{"add_k", "witten_bell", "kneser_ney", "modified_kneser_ney"}
	r.Evaluation.MarkovOrders = []int{1}
	r.Evaluation.HMMStates = []int{32}
	// Baum-Welch costs about 8·N² operations a token: train it on a tenth
	// of the corpus, between 10,000 and 200,000 tokens.
	r.Evaluation.HMMMaxTokens = min(max(size/10, 10000), 200000)
	r.Evaluation.HMMMaxIterations = 20
	r.Checkpoint.EverySteps = 200
	r.Checkpoint.EveryMinutes = 2
	return r
}

func runDemo(opts *demoOptions) error {
	folder, runPath := opts.Run, opts.Run
	if opts.Dir != "" { // the layout before --run
		folder, runPath = opts.Dir, filepath.Join(opts.Dir, "run")
	}
	if opts.Restart {
		if err := os.RemoveAll(runPath); err != nil {
			return fmt.Errorf("restart demo: %w", err)
		}
	}
	if err := os.MkdirAll(folder, 0o755); err != nil {
		return fmt.Errorf("demo folder %s: %w", folder, unwrapPath(err))
	}
	corpus := filepath.Join(folder, demoCorpusName)
	fmt.Fprintf(opts.Out, "weft demo: generating the Port Averly dispatch log (seed %d, %s bytes)\n", opts.Seed, thousands(int64(opts.Size)))
	nMarks, err := demo.WriteFiles(corpus, opts.Seed, opts.Size)
	if err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "  %s: %s long-range positions marked in %s\n", corpus, thousands(int64(nMarks)), filepath.Base(corpus)+demo.MarksExt)

	abs, err := filepath.Abs(corpus)
	if err != nil {
		return err
	}
	r := demoRun(abs, opts.Size)
	b, err := configs.Encode(&r)
	if err != nil {
		return err
	}
	runFile := filepath.Join(folder, "demo.toml")
	if err := writeFileAtomic(runFile, b); err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "weft demo: training a 1-layer LSTM of %d units for up to %v (run file %s)\n", r.Model.HiddenSize, opts.For, runFile)
	res, err := trainRun(opts.cmdContext, &r, runPath, trainRunOptions{Duration: opts.For})
	if err != nil {
		return err
	}
	if res.Interrupted {
		return &exitError{code: exitInterrupted, err: fmt.Errorf("demo interrupted after step %d; training state saved in %s: run 'weft demo' again to resume", res.Steps, runPath)}
	}
	fmt.Fprintf(opts.Out, "  trained %s steps (%d epochs); best validation %.3f bits per character\n", thousands(res.Steps), res.Epochs, res.BestValBitsPerChar)

	fmt.Fprintln(opts.Out, "weft demo: fitting the baselines and comparing on the test split")
	rd, err := openRunDir(runPath)
	if err != nil {
		return err
	}
	defer rd.Close()
	cmp, err := evaluateRun(opts.cmdContext, &r, rd, evalSettings{Checkpoint: "best", Split: "test", Streams: 1})
	if err != nil {
		return err
	}
	fmt.Fprintln(opts.Out)
	printComparison(opts.Out, cmp, shownRows(cmp, false, 0))
	fmt.Fprintln(opts.Out)
	printDemoVerdict(opts, cmp)
	rd.Close() // the report opens the run directory itself
	page, err := writeRunReport(opts.cmdContext, runPath, 0)
	if err != nil {
		return err
	}
	fmt.Fprintf(opts.Out, "\nrun directory: %s\nreport: %s\n", runPath, page)
	fmt.Fprintf(opts.Out, "next: weft sample --run %s --prompt \"06:12 \"   or   weft eval --run %s\n", runPath, runPath)
	return nil
}

// printDemoVerdict states, from the table's own numbers, whether the
// recurrent model beat the best baseline at the long-range positions.
func printDemoVerdict(opts *demoOptions, cmp *comparison) {
	var rnnLR, baseLR = math.NaN(), math.NaN()
	for _, b := range cmp.LongRange {
		if len(b.Parts) == 0 {
			continue
		}
		for _, row := range cmp.Rows {
			if row.Model != b.Model {
				continue
			}
			switch {
			case row.Kind == "rnn":
				rnnLR = b.Parts[0].BitsPerChar
			case row.Model == cmp.BestBaseline:
				baseLR = b.Parts[0].BitsPerChar
			}
		}
	}
	if math.IsNaN(rnnLR) || math.IsNaN(baseLR) {
		fmt.Fprintln(opts.Out, "no long-range comparison could be made")
		return
	}
	if rnnLR < baseLR {
		fmt.Fprintf(opts.Out, "at the long-range positions the LSTM needs %.3f bits per character, the best baseline (%s) %.3f: %.3f fewer\n",
			rnnLR, cmp.BestBaseline, baseLR, baseLR-rnnLR)
	} else {
		fmt.Fprintf(opts.Out, "at the long-range positions the LSTM needs %.3f bits per character, the best baseline (%s) %.3f: the LSTM has NOT learned them yet; train longer (weft demo --for 10m)\n",
			rnnLR, cmp.BestBaseline, baseLR)
	}
}

// demoMarks returns the long-range mask of the reported split when the
// run's corpus is one file with a marks file beside it (the demo corpus),
// and nil otherwise.
func demoMarks(r *configs.Run, ds *data.Dataset, split string) ([]bool, error) {
	if len(r.Data.Files) != 1 {
		return nil, nil
	}
	sp := ds.Test
	if split == "validation" {
		sp = ds.Validation
	}
	return demo.SplitMarks(r.Data.Files[0], sp)
}
