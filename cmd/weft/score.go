package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"weft/checkpoint/runs"
	"weft/data"
	"weft/eval"
	"weft/eval/surprise"
)

type scoreOptions struct {
	cmdContext
	Files      []string
	Run        string
	Checkpoint string
	Baseline   string
	Unit       string
	Window     int
	MaxChars   int
	Context    int
	JSON       bool
	Sort       bool
	Top        int
	Threads    int
}

func newScoreCmd(d *deps, runF func(*scoreOptions) error) *cobra.Command {
	opts := &scoreOptions{}
	cmd := &cobra.Command{
		Use:     "score (--run DIR | --checkpoint FILE) [--baseline NAME] FILE... | -",
		Example: "  weft score --run runs/night --top 20 app.log\n  weft score --run runs/demo --context 200 --sort check.log",
		Short:   "Score text by how surprising a model finds it, line by line",
		Long: `Score text files (- reads standard input) with a trained model (the run's best
checkpoint, or --checkpoint as for 'weft sample') or with a fitted baseline of
the run (--baseline NAME, a label of the 'weft baselines' table such as
"5-gram kneser_ney", "markov-2" or "hmm-16").

Each unit is scored: a line with its line end (--unit line, the default; the
line end counts as one character and is predicted like any other token), a
whole file (--unit document, followed by the document boundary when the
vocabulary has one), or consecutive windows of --window N tokens across line
ends (--unit window). The line column is where the unit starts. Characters
or words outside the vocabulary are scored as the unknown symbol and
counted. For each unit it prints the total surprise in bits
(-log2 of the probability the model gives the text), bits per character, the
most surprising token with its surprise and its character offset in the unit,
the number of tokens that are the unknown symbol, and the text (cut at 256
characters). Output is tab-separated with a header line, or one JSON object
per unit with --json.

Context: by default every unit is scored on its own from the start of a
document (a fresh model state), so a line's score does not depend on the
lines before it or on the order of the files. A recurrent model trained on
continuous text rarely sees a fresh state, so its first few tokens after one
cost more than they would in the stream; --context N instead warms the model
up on the N tokens of the same input just before each piece (not scored,
never across files), so that a line is scored as it occurs in its log, and
its score then depends on what precedes it. A unit longer than --max-chars characters is
scored in consecutive pieces of that size, each from a fresh state, and its
pieces column says into how many; memory stays bounded whatever the length
of the input.

--sort prints the units most surprising first (by bits per character), which
holds every row in memory; --top N keeps only the N most surprising (in
bounded memory) and implies --sort.`,
		Args: func(cmd *cobra.Command, args []string) error {
			if len(args) == 0 {
				return usagef("%s takes one or more files, or - for standard input", cmd.CommandPath())
			}
			return nil
		},
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			opts.Files = args
			if runF != nil {
				return runF(opts)
			}
			return runScore(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory whose model or baseline to use")
	f.StringVar(&opts.Checkpoint, "checkpoint", "", `checkpoint: with --run "best" (default), "latest", a step or a file name; else a file`)
	f.StringVar(&opts.Baseline, "baseline", "", "score with this fitted baseline of the run instead of the model")
	f.StringVar(&opts.Unit, "unit", "line", "what to score: line, document or window")
	f.IntVar(&opts.Window, "window", 0, "tokens per window, with --unit window")
	f.IntVar(&opts.MaxChars, "max-chars", 64<<10, "longest stretch of a unit scored in one piece, in characters")
	f.IntVar(&opts.Context, "context", 0, "warm the model up on this many tokens of the preceding text of the same input (0: score each unit from a fresh state)")
	f.BoolVar(&opts.JSON, "json", false, "print one JSON object per unit")
	f.BoolVar(&opts.Sort, "sort", false, "print the most surprising units first (bits per character)")
	f.IntVar(&opts.Top, "top", 0, "print only the N most surprising units (implies --sort)")
	addThreadsFlag(cmd, &opts.Threads, 1, " (pieces scored at the same time, one thread each; baselines use one)")
	return cmd
}

// scorer is a language model with the vocabulary that encodes its text.
type scorer struct {
	lm      eval.LanguageModel
	kind    string
	vocab   *data.Vocab
	workers int // pieces scored at once
}

// loadScorer opens the model or the baseline the options name.
func loadScorer(opts *scoreOptions) (*scorer, error) {
	if opts.Baseline == "" {
		m, err := loadRunModel(opts.Run, opts.Checkpoint)
		if err != nil {
			return nil, err
		}
		// Concurrent LogProbs calls, each on its own goroutine, rather than
		// a shared pool: one hypothesis' products are too small to split.
		return &scorer{lm: m.Net, kind: "rnn", vocab: m.Vocab, workers: opts.Threads}, nil
	}
	if opts.Run == "" {
		return nil, usagef("--baseline needs --run DIR, whose baselines folder holds it")
	}
	if opts.Checkpoint != "" {
		return nil, usagef("give --baseline or --checkpoint, not both")
	}
	v, err := data.ReadVocabFile(filepath.Join(opts.Run, data.VocabFile))
	if err != nil {
		return nil, err
	}
	lm, kind, err := openBaseline(opts.Run, opts.Baseline)
	if err != nil {
		return nil, err
	}
	if lm.VocabSize() != v.Len() {
		return nil, fmt.Errorf("baseline %q predicts %d tokens but the run's vocabulary has %d entries; fit the baselines again", opts.Baseline, lm.VocabSize(), v.Len())
	}
	return &scorer{lm: lm, kind: kind, vocab: v}, nil
}

// openBaseline rebuilds a fitted baseline from the run's baselines folder
// by its label (eval.ParseBaselineLabel, eval.LoadBaseline); a pseudo-count
// the label leaves out comes from the run file.
func openBaseline(run, name string) (eval.LanguageModel, string, error) {
	spec, err := eval.ParseBaselineLabel(name)
	if errors.Is(err, eval.ErrBadLabel) {
		return nil, "", usagef(`--baseline %q: want a label such as "5-gram kneser_ney", "3-gram add_k(0.5)", "markov-2" or "hmm-16"`, name)
	}
	if err != nil {
		return nil, "", fmt.Errorf("baseline %v", err)
	}
	k := spec.K
	if k == 0 && (spec.Kind == "markov" || spec.Method == eval.AddK) {
		r, err := runs.ReadRunFile(run, nil)
		if err != nil {
			return nil, "", err
		}
		k = r.Evaluation.AddK
	}
	lm, err := eval.LoadBaseline(runs.Layout(run).Baselines(), spec, k)
	switch {
	case errors.Is(err, os.ErrNotExist) && spec.Kind == "hmm":
		return nil, "", fmt.Errorf("run directory %s has no fitted %d-state HMM; run 'weft baselines --run %s' with it configured", run, spec.States, run)
	case errors.Is(err, os.ErrNotExist):
		return nil, "", fmt.Errorf("run directory %s has no fitted n-gram counts; run 'weft baselines --run %s' first", run, run)
	case err != nil:
		return nil, "", fmt.Errorf("baseline %q: %w", name, err)
	}
	return lm, spec.Kind, nil
}

// rowSink receives the rows: printed at once, or ranked first.
type rowSink struct {
	opts  *scoreOptions
	rank  *surprise.Ranking // nil: print at once
	wrote bool
}

func (s *rowSink) add(r surprise.Row) error {
	if s.rank != nil {
		s.rank.Add(r)
		return nil
	}
	return s.print(r)
}

func (s *rowSink) header() error {
	if s.opts.JSON || s.wrote {
		return nil
	}
	s.wrote = true
	_, err := io.WriteString(s.opts.Out, "source\tline\tcharacters\ttokens\tbits\tbits_per_char\tsurprise_bits\tsurprise_offset\tsurprise_token\tunknown_tokens\tpieces\ttext\n")
	return err
}

func (s *rowSink) print(r surprise.Row) error {
	r.Bits, r.BitsPerChar, r.SurpriseBits = round6(r.Bits), round6(r.BitsPerChar), round6(r.SurpriseBits)
	if s.opts.JSON {
		return writeJSONLine(s.opts.Out, r)
	}
	if err := s.header(); err != nil {
		return err
	}
	_, err := fmt.Fprintf(s.opts.Out, "%s\t%d\t%d\t%d\t%.4f\t%.4f\t%.4f\t%d\t%s\t%d\t%d\t%s\n",
		tsvEscape(r.Source), r.Line, r.Characters, r.Tokens, r.Bits, r.BitsPerChar, r.SurpriseBits, r.SurpriseOffset,
		tsvEscape(r.SurpriseToken), r.UnknownTokens, r.Pieces, tsvEscape(r.Text))
	return err
}

// close prints the ranked rows, most surprising first.
func (s *rowSink) close() error {
	if s.rank != nil {
		for _, r := range s.rank.Rows() {
			if err := s.print(r); err != nil {
				return err
			}
		}
	}
	return s.header()
}

// tsvEscape keeps a field on one line and in one column.
func tsvEscape(s string) string {
	if !strings.ContainsAny(s, "\\\t\n\r") {
		return s
	}
	return strings.NewReplacer(`\`, `\\`, "\t", `\t`, "\n", `\n`, "\r", `\r`).Replace(s)
}

func runScore(opts *scoreOptions) error {
	switch opts.Unit {
	case "line", "document":
		if opts.Window != 0 {
			return usagef("--window goes with --unit window")
		}
	case "window":
		if opts.Window < 1 {
			return usagef("--unit window needs --window N, a number of tokens of 1 or more")
		}
	default:
		return usagef("--unit must be line, document or window, got %q", opts.Unit)
	}
	if opts.MaxChars < 1 {
		return usagef("--max-chars must be at least 1, got %d", opts.MaxChars)
	}
	if opts.Threads < 1 {
		return usagef("--threads must be at least 1, got %d", opts.Threads)
	}
	if opts.Top < 0 {
		return usagef("--top must be 0 (all) or more, got %d", opts.Top)
	}
	stdin := 0
	for _, f := range opts.Files {
		if f == "-" {
			stdin++
		}
	}
	if stdin > 1 {
		return usagef("- (standard input) can be given once")
	}
	sc, err := loadScorer(opts)
	if err != nil {
		return err
	}
	if opts.Context < 0 {
		return usagef("--context must be 0 or more tokens, got %d", opts.Context)
	}
	sink := &rowSink{opts: opts}
	if opts.Sort || opts.Top > 0 {
		sink.rank = surprise.NewRanking(opts.Top)
	}
	u, err := surprise.New(sc.lm, sc.kind, sc.vocab, surprise.Options{Unit: opts.Unit, Window: opts.Window, MaxChars: opts.MaxChars,
		Context: opts.Context, Workers: sc.workers}, sink.add)
	if errors.Is(err, surprise.ErrNoLineEnd) {
		return fmt.Errorf("%w; use --unit document or --unit window", err)
	}
	if err != nil {
		return err
	}
	for _, name := range opts.Files {
		if err := scoreSource(opts, u, name); err != nil {
			return err
		}
	}
	if err := u.Flush(); err != nil {
		return err
	}
	return sink.close()
}

func scoreSource(opts *scoreOptions, u *surprise.Scorer, name string) error {
	var r io.Reader = opts.In
	if name != "-" {
		f, err := os.Open(name)
		if err != nil {
			return fmt.Errorf("score %s: %w", name, unwrapPath(err))
		}
		defer f.Close()
		r = f
	}
	any, err := u.Score(opts.ctx, r, name)
	if err == nil && !any {
		fmt.Fprintf(opts.Err, "weft: %s: no text to score\n", name)
	}
	return err
}
