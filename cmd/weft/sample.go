package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"weft/checkpoint/generate"
	"weft/data"
	"weft/rnn"
)

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
		Use:     "sample (--run DIR | --checkpoint FILE)",
		Example: "  weft sample --run runs/night --prompt \"Dear\" --length 300c --seed 7",
		Short:   "Generate continuations of a prompt with a trained model",
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
	addThreadsFlag(cmd, &opts.Threads, 1, " (on the model's matrix products)")
	return cmd
}

// encodePrompt encodes a prompt; pieces outside the vocabulary are an
// error listing them, or the unknown id with mapUnknown.
func encodePrompt(cc cmdContext, v *data.Vocab, text string, mapUnknown bool) ([]int, error) {
	ids, err := v.EncodeKnown(cc.ctx, text, "prompt", mapUnknown)
	var ue *data.UnknownPiecesError
	if errors.As(err, &ue) {
		return nil, fmt.Errorf("%w (pass --map-unknown to read them as %s)", err, data.UnknownPiece)
	}
	return ids, err
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

func newSampleJSON(i int, seed *uint64, prompt string, c generate.Continuation) sampleJSON {
	rec := sampleJSON{Sample: i, Seed: seed, Prompt: prompt, Text: c.Text, Stop: c.Stop, Characters: len([]rune(c.Text)),
		LogProb: round6(c.LogProb), Bits: round6(-c.LogProb / math.Ln2), Tokens: make([]tokenJSON, len(c.Tokens))}
	for k, tk := range c.Tokens {
		rec.Tokens[k] = tokenJSON{ID: tk.ID, Text: tk.Text, LogProb: round6(tk.LogProb), Bits: round6(-tk.LogProb / math.Ln2)}
	}
	return rec
}

func runSample(opts *sampleOptions) error {
	length, err := generate.ParseLength(opts.Length)
	if err != nil {
		return usagef("--length: %v", err)
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
	var seedp *uint64
	if opts.Beam == 0 && !scfg.Greedy() {
		seedp = &seed
	}
	o := generate.Options{Length: length, Samples: opts.Samples, Sampling: scfg, Seed: seed, Beam: opts.Beam, Stop: opts.Stop}
	// Drawn text streams as it comes, after a heading and the prompt; a
	// beam's is printed whole at the end, its heading with its bits.
	started := 0
	begin := func(i int, bits float64) error {
		for ; started < i; started++ {
			if opts.Samples > 1 && opts.Beam > 0 {
				fmt.Fprintf(opts.Out, "== sample %d: %.4f bits ==\n", started+1, bits)
			} else if opts.Samples > 1 {
				fmt.Fprintf(opts.Out, "== sample %d ==\n", started+1)
			}
			if _, err := io.WriteString(opts.Out, promptText); err != nil {
				return err
			}
		}
		return nil
	}
	var stream func(int, string) error
	if !opts.JSON && opts.Beam == 0 {
		stream = func(i int, text string) error {
			if err := begin(i, 0); err != nil {
				return err
			}
			_, err := opts.Out.Write([]byte(text))
			return err
		}
	}
	return generate.Continue(opts.ctx, m, prompt, o, stream, func(i int, c generate.Continuation) error {
		if opts.JSON {
			return writeJSONLine(opts.Out, newSampleJSON(i, seedp, promptText, c))
		}
		if err := begin(i, -c.LogProb/math.Ln2); err != nil {
			return err
		}
		text := ""
		if opts.Beam > 0 {
			text = c.Text
		}
		if !strings.HasSuffix(promptText+c.Text, "\n") {
			text += "\n"
		}
		_, err := io.WriteString(opts.Out, text)
		return err
	})
}
