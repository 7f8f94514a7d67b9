package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"weft/checkpoint"
	"weft/checkpoint/runs"
	"weft/data"
	"weft/rnn"
	"weft/rnn/linalg"
)

// pcgStream is the second PCG seed word of weft sample: --seed S seeds
// PCG(S, pcgStream), so a seed names one sequence of draws everywhere.
const pcgStream = 0x7765667473616d70 // "weftsamp"

// generatedTextWarning ends the help of the commands that generate text.
const generatedTextWarning = `Generated text can be wrong, biased or offensive. It reflects the corpus the
model was trained on, mistakes and prejudices included, and says nothing true
by itself: have a person review it before any use.`

type sampleOptions struct {
	cmdContext
	Run         string
	Checkpoint  string
	Prompt      string
	PromptFile  string
	Length      string
	Samples     int
	Seed        uint64
	SeedSet     bool
	Temperature float64
	TopK        int
	TopP        float64
	Beam        int
	Stop        []string
	JSON        bool
	MapUnknown  bool
	Threads     int

	// set by the constructor from the flags that were given
	samplingSet bool
}

func newSampleCmd(d *deps, runF func(*sampleOptions) error) *cobra.Command {
	opts := &sampleOptions{}
	cmd := &cobra.Command{
		Use:   "sample (--run DIR | --checkpoint FILE)",
		Short: "Generate continuations of a prompt with a trained model",
		Long: `Continue a prompt with a trained model and print the continuations as they are
generated. The model is the best checkpoint of --run DIR (the newest one before
the first validation), or the one --checkpoint names: with --run, "best",
"latest", a step number or a file name in the run's checkpoints folder; a path
with a slash, or --checkpoint alone, is a checkpoint file.

The prompt is --prompt TEXT, or the file --prompt-file FILE (- reads standard
input); without either, a continuation starts at the beginning of a document.
Characters or words of the prompt outside the model's vocabulary are an error
listing them, unless --map-unknown reads them as the unknown symbol.

--length N generates N tokens; --length Nc generates until the continuation
has N characters. A continuation also ends at the vocabulary's boundary symbol
and just before any --stop string (the stop string is not printed). Each token
is drawn from the model's next-token distribution after --temperature
(0 = always the most probable token), --top-k (keep the k most probable) and
--top-p (keep the smallest set of most probable tokens whose probability
reaches p), applied in that order. The draws come from a PCG generator seeded
with --seed: the same seed, model, prompt and settings give the same text
(on machines whose matrix kernels round differently, a draw can in rare
cases differ).
Without --seed a seed is taken from the clock and printed on standard error.

--beam W searches for the most probable continuations instead of drawing,
keeping the W best partial continuations at each step by total
log-probability; it prints the --samples best when the search ends.
Continuations that end early compete with longer ones on their raw total, so
short ones are favoured. A wider beam is not guaranteed to find a better one.

With --samples N above 1, each continuation is preceded by a line
"== sample I ==" (with its total surprise in bits after --beam).

--json prints one JSON object per continuation, on one line: its text
(without the prompt), its tokens with their log-probabilities under the model
(nats, and bits of surprise), the totals, and why it ended ("length",
"boundary" or "stop_string").

` + generatedTextWarning,
		Args: exactArgs(0, "no arguments"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			f := cmd.Flags()
			opts.SeedSet = f.Changed("seed")
			opts.samplingSet = f.Changed("temperature") || f.Changed("top-k") || f.Changed("top-p")
			if f.Changed("prompt") && f.Changed("prompt-file") {
				return usagef("give --prompt or --prompt-file, not both")
			}
			if runF != nil {
				return runF(opts)
			}
			return runSample(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory whose model to use")
	f.StringVar(&opts.Checkpoint, "checkpoint", "", `checkpoint: with --run "best" (default), "latest", a step or a file name; else a file`)
	f.StringVar(&opts.Prompt, "prompt", "", "text to continue (default: the start of a document)")
	f.StringVar(&opts.PromptFile, "prompt-file", "", "read the prompt from this file (- for standard input)")
	f.StringVar(&opts.Length, "length", "200", "length of each continuation: N tokens, or Nc characters")
	f.IntVar(&opts.Samples, "samples", 1, "number of continuations")
	f.Uint64Var(&opts.Seed, "seed", 0, "seed of the random draws (default: from the clock, printed)")
	f.Float64Var(&opts.Temperature, "temperature", 1, "divide the log-probabilities by this; 0 is greedy decoding")
	f.IntVar(&opts.TopK, "top-k", 0, "draw only from the k most probable tokens (0: no limit)")
	f.Float64Var(&opts.TopP, "top-p", 0, "draw only from the smallest set of tokens whose probability reaches p (0 or 1: off)")
	f.IntVar(&opts.Beam, "beam", 0, "beam search of this width instead of drawing (0: off)")
	f.StringArrayVar(&opts.Stop, "stop", nil, "end a continuation before this text (repeatable)")
	f.BoolVar(&opts.JSON, "json", false, "print each continuation as a JSON object with per-token log-probabilities")
	f.BoolVar(&opts.MapUnknown, "map-unknown", false, "read prompt characters or words outside the vocabulary as the unknown symbol")
	addThreadsFlag(cmd, &opts.Threads)
	return cmd
}

// sampleLength is a parsed --length: tokens, or characters.
type sampleLength struct {
	n     int
	chars bool
}

func parseSampleLength(s string) (sampleLength, error) {
	l := sampleLength{}
	t := s
	if strings.HasSuffix(t, "c") {
		l.chars, t = true, strings.TrimSuffix(t, "c")
	}
	n, err := strconv.Atoi(t)
	if err != nil || n < 1 {
		return l, usagef("--length must be a positive number of tokens (200) or characters (200c), got %q", s)
	}
	l.n = n
	return l, nil
}

// maxTokens is the most tokens a continuation of l may take: l.n tokens,
// or enough for l.n characters of four-byte characters one byte token each.
func (l sampleLength) maxTokens() int {
	if l.chars {
		return 4*l.n + 16
	}
	return l.n
}

// addThreadsFlag adds --threads, the thread count of the model's matrix
// products. Results do not depend on it.
func addThreadsFlag(cmd *cobra.Command, dst *int) {
	cmd.Flags().IntVar(dst, "threads", 1, "threads for the model's matrix products (the output does not depend on it)")
}

// usePool gives m a pool of n threads and returns the function that
// closes it.
func usePool(m *checkpoint.Model, n int) (func(), error) {
	if n < 1 {
		return nil, usagef("--threads must be at least 1, got %d", n)
	}
	if n == 1 {
		return func() {}, nil
	}
	p := linalg.NewPool(n)
	m.Net.SetPool(p)
	return func() { m.Net.SetPool(nil); p.Close() }, nil
}

// loadRunModel loads the model of a run directory or a checkpoint file, as
// --run and --checkpoint say.
func loadRunModel(run, which string) (*checkpoint.Model, error) {
	switch {
	case run == "" && which == "":
		return nil, usagef("give --run DIR or --checkpoint FILE")
	case run == "":
		return checkpoint.LoadModel(which)
	case strings.ContainsAny(which, `/\`):
		return checkpoint.LoadModel(which)
	}
	return runs.OpenModel(run, which)
}

// encodePrompt encodes a prompt. Pieces outside the vocabulary are an
// error listing them, or the unknown id with mapUnknown.
func encodePrompt(cc cmdContext, v *data.Vocab, text string, mapUnknown bool) ([]int, error) {
	var ids []int
	var unknown []string
	seen := map[string]bool{}
	runes := []rune(text)
	pos := 0
	err := v.EncodeReader(cc.ctx, strings.NewReader(text), "prompt", func(id, chars int) {
		if id == v.Unknown() {
			end := min(pos+max(chars, 1), len(runes))
			if p := string(runes[min(pos, end):end]); !seen[p] {
				seen[p] = true
				unknown = append(unknown, p)
			}
		}
		pos += chars
		ids = append(ids, id)
	})
	if err != nil {
		return nil, err
	}
	if len(unknown) > 0 && !mapUnknown {
		what := "character"
		switch v.Kind() {
		case data.KindWord, data.KindBPE:
			what = "word"
		case data.KindSymbols:
			what = "symbol"
		}
		if len(unknown) > 1 {
			what += "s"
		}
		list := make([]string, 0, min(len(unknown), 10))
		for _, u := range unknown[:min(len(unknown), 10)] {
			list = append(list, strconv.Quote(u))
		}
		more := ""
		if len(unknown) > 10 {
			more = fmt.Sprintf(" and %d more", len(unknown)-10)
		}
		return nil, fmt.Errorf("prompt has %d %s outside the model's vocabulary: %s%s (pass --map-unknown to read them as %s)",
			len(unknown), what, strings.Join(list, ", "), more, data.UnknownPiece)
	}
	return ids, nil
}

func readPrompt(opts *sampleOptions) (string, error) {
	switch opts.PromptFile {
	case "":
		return opts.Prompt, nil
	case "-":
		b, err := io.ReadAll(opts.In)
		if err != nil {
			return "", fmt.Errorf("read prompt from standard input: %w", err)
		}
		return string(b), nil
	}
	b, err := os.ReadFile(opts.PromptFile)
	if err != nil {
		return "", fmt.Errorf("prompt file %s: %w", opts.PromptFile, unwrapPath(err))
	}
	return string(b), nil
}

// sampleJSON is one continuation as --json prints it.
type sampleJSON struct {
	Sample     int         `json:"sample"`
	Seed       *uint64     `json:"seed,omitempty"`
	Prompt     string      `json:"prompt"`
	Text       string      `json:"text"`
	Stop       string      `json:"stop"`
	Characters int         `json:"characters"`
	LogProb    float64     `json:"logprob_nats"`
	Bits       float64     `json:"bits"`
	Tokens     []tokenJSON `json:"tokens"`
}

type tokenJSON struct {
	ID      int     `json:"id"`
	Text    string  `json:"text"`
	LogProb float64 `json:"logprob_nats"`
	Bits    float64 `json:"bits"`
}

// round6 rounds to 6 decimals, so that printed numbers do not depend on
// the last bits of a machine's arithmetic.
func round6(x float64) float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return x
	}
	return math.Round(x*1e6) / 1e6
}

// stopText collects a continuation's text, writing it to out (when not
// nil) as soon as no stop string can begin in it, and cuts it before the
// first stop string.
type stopText struct {
	stops   []string
	out     io.Writer
	text    []byte
	written int
}

// add appends s and reports whether a stop string now occurs; the text is
// then cut just before it.
func (st *stopText) add(s string) (bool, error) {
	old := len(st.text)
	st.text = append(st.text, s...)
	cut := -1
	for _, stop := range st.stops {
		from := max(0, old-len(stop)+1)
		if i := bytes.Index(st.text[from:], []byte(stop)); i >= 0 && (cut < 0 || from+i < cut) {
			cut = from + i
		}
	}
	if cut >= 0 {
		st.text = st.text[:cut]
		return true, st.flush(cut)
	}
	// Hold back the longest tail that could start a stop string.
	safe := len(st.text)
	for _, stop := range st.stops {
		for k := min(len(stop)-1, len(st.text)); k > 0; k-- {
			if bytes.HasSuffix(st.text, []byte(stop[:k])) {
				safe = min(safe, len(st.text)-k)
				break
			}
		}
	}
	return false, st.flush(max(safe, st.written))
}

func (st *stopText) flush(upto int) error {
	if st.out == nil || upto <= st.written {
		return nil
	}
	_, err := st.out.Write(st.text[st.written:upto])
	st.written = upto
	return err
}

// finish writes what is held back.
func (st *stopText) finish() error { return st.flush(len(st.text)) }

func runSample(opts *sampleOptions) error {
	length, err := parseSampleLength(opts.Length)
	if err != nil {
		return err
	}
	if opts.Samples < 1 {
		return usagef("--samples must be at least 1, got %d", opts.Samples)
	}
	if opts.Beam < 0 {
		return usagef("--beam must be 0 (off) or a width of 1 or more, got %d", opts.Beam)
	}
	if opts.Beam > 0 && opts.samplingSet {
		return usagef("--beam searches instead of drawing: it takes no --temperature, --top-k or --top-p")
	}
	if opts.Beam > 0 && opts.Samples > opts.Beam {
		return usagef("--samples %d is more than the beam keeps (--beam %d)", opts.Samples, opts.Beam)
	}
	for _, s := range opts.Stop {
		if s == "" {
			return usagef("--stop needs a non-empty text")
		}
	}
	scfg := rnn.Sampling{Temperature: opts.Temperature, TopK: opts.TopK, TopP: opts.TopP}
	if err := scfg.Validate(); err != nil {
		return usagef("%v", err)
	}
	promptText, err := readPrompt(opts)
	if err != nil {
		return err
	}
	m, err := loadRunModel(opts.Run, opts.Checkpoint)
	if err != nil {
		return err
	}
	closePool, err := usePool(m, opts.Threads)
	if err != nil {
		return err
	}
	defer closePool()
	prompt, err := encodePrompt(opts.cmdContext, m.Vocab, promptText, opts.MapUnknown)
	if err != nil {
		return err
	}
	seed := opts.Seed
	if !opts.SeedSet && opts.Beam == 0 && !scfg.Greedy() {
		seed = uint64(opts.Now().UnixNano())
		fmt.Fprintf(opts.Err, "weft: seed %d (pass --seed %d to repeat)\n", seed, seed)
	}
	if opts.Beam > 0 {
		return sampleBeam(opts, m, promptText, prompt, length)
	}
	sp, err := rnn.NewSampler(scfg, rand.New(rand.NewPCG(seed, pcgStream)))
	if err != nil {
		return err
	}
	primed := m.Net.NewStream(1)
	if err := rnn.Prime(opts.ctx, primed, prompt); err != nil {
		return err
	}
	v := m.Vocab
	last := -1
	if len(prompt) > 0 {
		last = prompt[len(prompt)-1]
	}
	for i := 1; i <= opts.Samples; i++ {
		var out io.Writer
		if !opts.JSON {
			out = opts.Out
			if opts.Samples > 1 {
				fmt.Fprintf(out, "== sample %d ==\n", i)
			}
			if _, err := io.WriteString(out, promptText); err != nil {
				return err
			}
		}
		st := &stopText{stops: opts.Stop, out: out}
		rec := sampleJSON{Sample: i, Prompt: promptText, Stop: "length", Tokens: []tokenJSON{}}
		if !scfg.Greedy() {
			rec.Seed = &seed
		}
		prev, chars := last, 0
		s := primed.Clone()
		_, err := rnn.Generate(opts.ctx, s, sp, length.maxTokens(), func(tk rnn.Token) (bool, error) {
			t := ""
			if tk.ID != v.Boundary() {
				t = v.TokenText(prev, tk.ID)
			}
			rec.Tokens = append(rec.Tokens, tokenJSON{ID: tk.ID, Text: t, LogProb: round6(tk.LogProb), Bits: round6(-tk.LogProb / math.Ln2)})
			rec.LogProb += tk.LogProb
			prev = tk.ID
			if tk.ID == v.Boundary() {
				rec.Stop = "boundary"
				return true, nil
			}
			chars += v.Chars(tk.ID)
			stop, err := st.add(t)
			if stop {
				rec.Stop = "stop_string"
			}
			return stop || (length.chars && chars >= length.n), err
		})
		if err != nil {
			return err
		}
		if err := st.finish(); err != nil {
			return err
		}
		if opts.JSON {
			rec.Text = string(st.text)
			rec.Characters = len([]rune(rec.Text))
			rec.Bits = round6(-rec.LogProb / math.Ln2)
			rec.LogProb = round6(rec.LogProb)
			if err := writeJSONLine(opts.Out, rec); err != nil {
				return err
			}
			continue
		}
		if full := promptText + string(st.text); !strings.HasSuffix(full, "\n") {
			if _, err := io.WriteString(opts.Out, "\n"); err != nil {
				return err
			}
		}
	}
	return nil
}

func sampleBeam(opts *sampleOptions, m *checkpoint.Model, promptText string, prompt []int, length sampleLength) error {
	v := m.Vocab
	cfg := rnn.BeamConfig{Width: opts.Beam, MaxTokens: length.maxTokens(), End: v.Boundary()}
	if length.chars {
		cfg.Chars, cfg.MaxChars = v.Chars, length.n
	}
	hyps, err := rnn.BeamSearch(opts.ctx, m.Net, prompt, cfg)
	if err != nil {
		return err
	}
	last := -1
	if len(prompt) > 0 {
		last = prompt[len(prompt)-1]
	}
	for i, h := range hyps[:min(opts.Samples, len(hyps))] {
		rec := sampleJSON{Sample: i + 1, Prompt: promptText, Stop: "length", Tokens: []tokenJSON{}}
		st := &stopText{stops: opts.Stop}
		prev, stopped := last, false
		var total float64
		for _, tk := range h.Tokens {
			t := ""
			if tk.ID != v.Boundary() {
				t = v.TokenText(prev, tk.ID)
			} else {
				rec.Stop = "boundary"
			}
			prev = tk.ID
			if !stopped {
				rec.Tokens = append(rec.Tokens, tokenJSON{ID: tk.ID, Text: t, LogProb: round6(tk.LogProb), Bits: round6(-tk.LogProb / math.Ln2)})
				total += tk.LogProb
				if s, _ := st.add(t); s {
					stopped, rec.Stop = true, "stop_string"
				}
			}
		}
		rec.Text = string(st.text)
		if opts.JSON {
			rec.Characters = len([]rune(rec.Text))
			rec.LogProb, rec.Bits = round6(total), round6(-total/math.Ln2)
			if err := writeJSONLine(opts.Out, rec); err != nil {
				return err
			}
			continue
		}
		if opts.Samples > 1 {
			fmt.Fprintf(opts.Out, "== sample %d: %.4f bits ==\n", i+1, -total/math.Ln2)
		}
		full := promptText + rec.Text
		if !strings.HasSuffix(full, "\n") {
			full += "\n"
		}
		if _, err := io.WriteString(opts.Out, full); err != nil {
			return err
		}
	}
	return nil
}

// writeJSONLine writes v as one line of JSON, without escaping HTML
// characters.
func writeJSONLine(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		if errors.Is(err, io.ErrShortWrite) {
			return err
		}
		return fmt.Errorf("write JSON: %w", err)
	}
	return nil
}
