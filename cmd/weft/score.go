package main

import (
	"container/heap"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"unicode/utf8"

	"github.com/spf13/cobra"

	"weft/configs"
	"weft/data"
	"weft/eval"
)

// scoreTextLimit is the most characters of a unit's text that score
// prints; longer texts are cut and end with "…".
const scoreTextLimit = 256

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
		Use:   "score (--run DIR | --checkpoint FILE) [--baseline NAME] FILE... | -",
		Short: "Score text by how surprising a model finds it, line by line",
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
	f.IntVar(&opts.Threads, "threads", 1, "pieces the model scores at the same time, one thread each (baselines use 1; the output does not depend on it)")
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
		r, err := configs.Load(filepath.Join(run, runConfigFile), nil)
		if err != nil {
			return nil, "", err
		}
		k = r.Evaluation.AddK
	}
	lm, err := eval.LoadBaseline(filepath.Join(run, baselinesDir), spec, k)
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

// scoreRow is one scored unit.
type scoreRow struct {
	Source         string  `json:"source"`
	Line           int     `json:"line"`
	Characters     int     `json:"characters"`
	Tokens         int     `json:"tokens"`
	Bits           float64 `json:"bits"`
	BitsPerChar    float64 `json:"bits_per_char"`
	SurpriseBits   float64 `json:"surprise_bits"`
	SurpriseOffset int     `json:"surprise_offset"`
	SurpriseToken  string  `json:"surprise_token"`
	UnknownTokens  int     `json:"unknown_tokens"`
	Pieces         int     `json:"pieces"`
	Text           string  `json:"text"` // empty for --unit document

	nats float64
	seq  int // order of scoring, for stable sorting
}

// unitScorer cuts the tokens of each unit into pieces of at most maxChars
// characters, scores every piece from the start of a document, and
// assembles each unit's row from its pieces' results, in order. With
// workers > 1 up to that many pieces are scored at once (the model must be
// safe for concurrent LogProbs calls, as rnn.Model is); the rows, and every
// number in them, are the same for any number of workers.
type unitScorer struct {
	cc       cmdContext
	sc       *scorer
	maxChars int
	keepText bool
	skipText int // token id left out of the text: the line end of a line unit
	workers  int
	context  int                  // tokens of preceding text each piece is warmed up on
	emit     func(scoreRow) error // receives the finished rows in order

	recent []int // the last context tokens of the current source, oldest first

	cur   *pieceJob   // the piece being filled
	queue []*pieceJob // pieces handed to workers, oldest first
	free  []*pieceJob
	sem   chan struct{}

	// The unit being assembled.
	row   scoreRow
	worst float64 // surprise of the most surprising token so far, in nats
	text  []byte
	runes int
	prev  int
}

// pieceJob is one piece of a unit: its tokens, their characters and, once
// scored, their log-probabilities.
type pieceJob struct {
	warm          []int // context tokens scored before the piece, not counted
	tokens, chars []int
	nchars        int
	logp          []float64
	err           error
	done          chan struct{}

	first, last bool // the piece starts or ends its unit
	source      string
	line        int
}

func (u *unitScorer) newJob() *pieceJob {
	if n := len(u.free); n > 0 {
		j := u.free[n-1]
		u.free = u.free[:n-1]
		*j = pieceJob{warm: j.warm[:0], tokens: j.tokens[:0], chars: j.chars[:0], logp: j.logp[:0]}
		return u.withContext(j)
	}
	return u.withContext(&pieceJob{})
}

// withContext gives a new piece the tokens of preceding text it is warmed
// up on.
func (u *unitScorer) withContext(j *pieceJob) *pieceJob {
	j.warm = append(j.warm[:0], u.recent...)
	return j
}

// start begins a unit at line of source.
func (u *unitScorer) start(source string, line int) {
	u.cur = u.newJob()
	u.cur.first, u.cur.source, u.cur.line = true, source, line
}

// add appends one token of the current unit, handing the piece over first
// when the token would take it past maxChars.
func (u *unitScorer) add(id, chars int) error {
	if u.maxChars > 0 && u.cur.nchars+chars > u.maxChars && len(u.cur.tokens) > 0 {
		if err := u.submit(u.cur); err != nil {
			return err
		}
		u.cur = u.newJob()
	}
	j := u.cur
	j.tokens = append(j.tokens, id)
	j.chars = append(j.chars, chars)
	j.nchars += chars
	if u.context > 0 {
		if len(u.recent) == u.context {
			copy(u.recent, u.recent[1:])
			u.recent = u.recent[:u.context-1]
		}
		u.recent = append(u.recent, id)
	}
	return nil
}

// end ends the current unit; its row goes to emit once its pieces are
// scored (a unit without tokens gives no row).
func (u *unitScorer) end() error {
	j := u.cur
	u.cur = nil
	j.last = true
	return u.submit(j)
}

// flush waits for every piece handed over and emits the rows they finish.
func (u *unitScorer) flush() error {
	for len(u.queue) > 0 {
		if err := u.consumeOldest(); err != nil {
			return err
		}
	}
	return nil
}

func (u *unitScorer) submit(j *pieceJob) error {
	if u.workers <= 1 {
		u.compute(j)
		return u.consume(j)
	}
	if u.sem == nil {
		u.sem = make(chan struct{}, u.workers)
	}
	j.done = make(chan struct{})
	u.queue = append(u.queue, j)
	u.sem <- struct{}{}
	go func() {
		u.compute(j)
		<-u.sem
		close(j.done)
	}()
	for len(u.queue) > 2*u.workers {
		if err := u.consumeOldest(); err != nil {
			return err
		}
	}
	return nil
}

func (u *unitScorer) consumeOldest() error {
	j := u.queue[0]
	<-j.done
	u.queue = u.queue[1:]
	return u.consume(j)
}

// compute scores one piece from the start of a document with the model's
// LogProbs: the code weft eval scores with.
func (u *unitScorer) compute(j *pieceJob) {
	n := len(j.tokens)
	if n == 0 {
		j.logp = j.logp[:0]
		return
	}
	if len(j.warm) == 0 {
		j.logp = slices.Grow(j.logp[:0], n)[:n]
		j.err = u.sc.lm.LogProbs(u.cc.ctx, j.logp, j.tokens)
		return
	}
	// Score the context and the piece as one sequence and keep the piece's
	// part: the piece is predicted from the state the context leaves.
	w := len(j.warm)
	seq := append(slices.Clip(j.warm), j.tokens...)
	lp := make([]float64, len(seq))
	j.err = u.sc.lm.LogProbs(u.cc.ctx, lp, seq)
	j.logp = append(j.logp[:0], lp[w:]...)
}

// consume adds a scored piece to its unit, totalled by eval.NewResult as
// weft eval totals a split, and emits the row after the unit's last piece.
func (u *unitScorer) consume(j *pieceJob) error {
	defer func() { u.free = append(u.free, j) }()
	if j.err != nil {
		return j.err
	}
	if j.first {
		u.row = scoreRow{Source: j.source, Line: j.line}
		u.worst = math.Inf(-1)
		u.text, u.runes, u.prev = u.text[:0], 0, -1
	}
	v := u.sc.vocab
	if len(j.tokens) > 0 {
		res := eval.NewResult(u.sc.lm.Name(), u.sc.kind, "", j.logp, j.nchars)
		res.SetUnknown(j.tokens, v.Unknown(), false)
		offset := u.row.Characters
		for i, lp := range j.logp {
			id := j.tokens[i]
			if -lp > u.worst {
				u.worst = -lp
				u.row.SurpriseBits = -lp / math.Ln2
				u.row.SurpriseOffset = offset
				u.row.SurpriseToken = v.Decode(j.tokens[i : i+1])
				if id == v.Boundary() || id == v.Unknown() {
					u.row.SurpriseToken = v.Piece(id)
				}
			}
			offset += j.chars[i]
			if u.keepText && u.runes <= scoreTextLimit && id != u.skipText {
				t := tokenText(v, u.prev, id)
				u.text = append(u.text, t...)
				u.runes += utf8.RuneCountInString(t)
				u.prev = id
			}
		}
		u.row.nats += res.CrossEntropyNats
		u.row.Characters += j.nchars
		u.row.Tokens += res.Tokens
		u.row.UnknownTokens += res.UnknownTokens
		u.row.Pieces++
	}
	if !j.last || u.row.Tokens == 0 {
		return nil
	}
	r := u.row
	r.Bits = r.nats / math.Ln2
	r.BitsPerChar = r.Bits / float64(r.Characters)
	if u.keepText {
		r.Text = string(u.text)
		if u.runes > scoreTextLimit {
			r.Text = string(append([]rune(r.Text)[:scoreTextLimit], '…'))
		}
	}
	return u.emit(r)
}

// rowSink receives the rows: printed at once, or kept for sorting.
type rowSink struct {
	opts  *scoreOptions
	n     int
	all   []scoreRow
	top   rowHeap
	wrote bool
}

func (s *rowSink) add(r scoreRow) error {
	r.seq = s.n
	s.n++
	switch {
	case s.opts.Top > 0:
		if s.top.Len() < s.opts.Top {
			heap.Push(&s.top, r)
		} else if rowLess(s.top[0], r) {
			s.top[0] = r
			heap.Fix(&s.top, 0)
		}
		return nil
	case s.opts.Sort:
		s.all = append(s.all, r)
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

func (s *rowSink) print(r scoreRow) error {
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

// close prints the kept rows, most surprising first.
func (s *rowSink) close() error {
	rows := s.all
	if s.opts.Top > 0 {
		rows = []scoreRow(s.top)
	}
	slices.SortStableFunc(rows, func(a, b scoreRow) int {
		switch {
		case rowLess(b, a):
			return -1
		case rowLess(a, b):
			return 1
		}
		return 0
	})
	for _, r := range rows {
		if err := s.print(r); err != nil {
			return err
		}
	}
	return s.header()
}

// rowLess orders rows by surprise: a is less surprising than b by bits per
// character, or equally surprising and scored later.
func rowLess(a, b scoreRow) bool {
	if a.BitsPerChar != b.BitsPerChar {
		return a.BitsPerChar < b.BitsPerChar
	}
	return a.seq > b.seq
}

// rowHeap is a min-heap of rows by surprise: its root is the least
// surprising row kept.
type rowHeap []scoreRow

func (h rowHeap) Len() int           { return len(h) }
func (h rowHeap) Less(i, j int) bool { return rowLess(h[i], h[j]) }
func (h rowHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *rowHeap) Push(x any)        { *h = append(*h, x.(scoreRow)) }
func (h *rowHeap) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
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
	v := sc.vocab
	newline := -1
	if id, ok := v.ID("\n"); ok {
		newline = id
	}
	if opts.Unit == "line" && newline < 0 {
		return fmt.Errorf("the model's vocabulary has no line-end entry, so it cannot score lines; use --unit document or --unit window")
	}
	sink := &rowSink{opts: opts}
	if opts.Context < 0 {
		return usagef("--context must be 0 or more tokens, got %d", opts.Context)
	}
	u := &unitScorer{cc: opts.cmdContext, sc: sc, maxChars: opts.MaxChars, keepText: opts.Unit != "document", skipText: -1,
		workers: sc.workers, context: opts.Context, emit: sink.add}
	if opts.Unit == "line" {
		u.skipText = newline
	}
	for _, name := range opts.Files {
		if err := scoreSource(opts, u, name, newline); err != nil {
			return err
		}
	}
	if err := u.flush(); err != nil {
		return err
	}
	if opts.Sort || opts.Top > 0 {
		return sink.close()
	}
	return sink.header()
}

func scoreSource(opts *scoreOptions, u *unitScorer, name string, newline int) error {
	var r io.Reader
	source := name
	if name == "-" {
		r, source = opts.In, "-"
	} else {
		f, err := os.Open(name)
		if err != nil {
			return fmt.Errorf("score %s: %w", name, unwrapPath(err))
		}
		defer f.Close()
		r = f
	}
	v := u.sc.vocab
	u.recent = u.recent[:0] // context never crosses files
	line := 1
	inUnit := 0 // tokens in the current unit
	var failed error
	err := v.EncodeReader(opts.ctx, r, source, func(id, chars int) {
		if failed != nil {
			return
		}
		if inUnit == 0 {
			u.start(source, line)
		}
		if failed = u.add(id, chars); failed != nil {
			return
		}
		inUnit++
		if id == newline {
			line++
		}
		switch {
		case opts.Unit == "line" && id == newline,
			opts.Unit == "window" && inUnit == opts.Window:
			failed = u.end()
			inUnit = 0
		}
	})
	if err == nil {
		err = failed
	}
	if err != nil {
		return err
	}
	if inUnit == 0 {
		if line == 1 {
			fmt.Fprintf(opts.Err, "weft: %s: no text to score\n", source)
		}
		return nil
	}
	if opts.Unit == "document" && v.Boundary() >= 0 && v.Piece(v.Boundary()) == data.DocumentPiece {
		// The document end, as the corpus pipeline adds it.
		if err := u.add(v.Boundary(), 0); err != nil {
			return err
		}
	}
	return u.end()
}
