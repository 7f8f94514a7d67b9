package memcheck

import (
	"bytes"
	"context"
	"fmt"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"time"

	"weft/data/corpustest"
)

// Setup describes one measured pass of the verbs over one corpus.
type Setup struct {
	// Weft is the command that runs weft: a binary, perhaps followed by
	// arguments that come before the verb.
	Weft []string
	// Env is added to the environment of every child.
	Env []string
	// Dir is the work folder: the corpus, the run file and the run
	// directory are made in it.
	Dir string
	// Size is the corpus size in bytes, and Seed the seed of its text
	// (corpustest.Generate).
	Size int64
	Seed uint64
	// Tokenizer is data.tokenizer; empty means "char".
	Tokenizer string
	// Steps is the number of training steps; zero means 5.
	Steps int
	// Timeout bounds each child; zero means an hour.
	Timeout time.Duration
	// DefaultLadder keeps the run file's default baseline ladder (n-grams
	// up to order 8 with five smoothers, a 32-state HMM, 1,000 bootstrap
	// samples) instead of RunFile's short one.
	DefaultLadder bool
	// Options tune the sampling and the kill limit.
	Options Options
}

// Verb is the measurement of one child process.
type Verb struct {
	Name string   `json:"verb"`
	Args []string `json:"args"`
	Peak Peak     `json:"peak"`
	// Err says why the child failed, with the tail of its output; "" when
	// it exited 0.
	Err string `json:"error,omitempty"`
}

// Measurement is one pass over one corpus.
type Measurement struct {
	CorpusBytes int64 `json:"corpus_bytes"`
	// RunDirBytes is the size of the files in the run directory after
	// prepare (the token cache, the vocabulary, the reports): the most that
	// a verb mapping the prepared corpus can add to its resident set in
	// file-backed pages.
	RunDirBytes int64         `json:"run_dir_bytes"`
	Generate    time.Duration `json:"generate_ns"`
	Verbs       []Verb        `json:"verbs"`
}

// Failed returns the first verb that failed, or nil.
func (m *Measurement) Failed() *Verb {
	for i := range m.Verbs {
		if m.Verbs[i].Err != "" {
			return &m.Verbs[i]
		}
	}
	return nil
}

// Verb returns the measurement of the named verb, or nil when it did not
// run.
func (m *Measurement) Verb(name string) *Verb {
	for i := range m.Verbs {
		if m.Verbs[i].Name == name {
			return &m.Verbs[i]
		}
	}
	return nil
}

// VerbNames are the verbs Measure runs, in order.
var VerbNames = []string{"prepare", "train", "baselines", "eval"}

// RunFile is the run file of the measurement: a tiny LSTM (16 units over
// embeddings of 8: 4·16·(8+16+1) gate weights and biases plus 8·V embedding
// and 17·V output weights for V vocabulary entries, under 4,000 parameters
// for the generated corpus's alphabet) so that what is measured is the data
// path, not the model; one thread; validation and a checkpoint only at the
// end of the steps; and a short baseline ladder whose tables do not grow
// with the generated corpus: n-grams up to order 3 over its alphabet of
// about 65 characters (at most 65³ = 274,625 trigram counts, fewer in
// fact), Markov chains of order 1, one 8-state HMM fitted on at most
// 100,000 tokens, 200 bootstrap samples, and the comparison scoring the
// first 100,000 tokens of each held-out split (evaluation.heldout_tokens,
// so that the check's small corpora already reach the cap); with defaultLadder, the
// default ladder instead.
func RunFile(corpus, tokenizer string, steps int, defaultLadder bool) string {
	ladder := shortLadder
	if defaultLadder {
		ladder = ""
	}
	return fmt.Sprintf(`# Written by weft/cmd/internal/memcheck: a tiny model over a generated corpus.
[data]
files = [%q]
tokenizer = %q

[model]
cell = "lstm"
layers = 1
hidden_size = 16
embedding_size = 8

[training]
batch_size = 8
unroll_steps = 32
threads = 1
max_steps = %d
seed = 1

[evaluation]
every_steps = 0
every_minutes = 0
%s
[checkpoint]
every_steps = 0
every_minutes = 0
`, corpus, tokenizer, steps, ladder)
}

const shortLadder = `heldout_tokens = 100000
ngram_orders = [1, 2, 3]
ngram_smoothers = ["witten_bell", "kneser_ney"]
markov_orders = [1]
hmm_states = [8]
hmm_max_iterations = 3
hmm_max_tokens = 100000
bootstrap_samples = 200
`

// Measure generates the corpus, writes the run file and runs prepare,
// train, baselines and eval on a run directory in s.Dir, one child process
// each, measuring each. It stops at the first verb that fails (the
// measurement then says which and why; the error is nil) and returns an
// error only when the set-up fails. The corpus is deleted at the end; the
// run directory is left in s.Dir for the caller to remove.
func Measure(ctx context.Context, s Setup) (Measurement, error) {
	m := Measurement{CorpusBytes: s.Size}
	if s.Tokenizer == "" {
		s.Tokenizer = "char"
	}
	if s.Steps <= 0 {
		s.Steps = 5
	}
	if s.Timeout <= 0 {
		s.Timeout = time.Hour
	}
	if len(s.Weft) == 0 {
		return m, fmt.Errorf("memcheck: no weft command")
	}
	weft := append([]string(nil), s.Weft...)
	if strings.ContainsRune(weft[0], filepath.Separator) && !filepath.IsAbs(weft[0]) {
		// The children run in s.Dir.
		abs, err := filepath.Abs(weft[0])
		if err != nil {
			return m, err
		}
		weft[0] = abs
	}
	corpus := filepath.Join(s.Dir, "corpus.txt")
	start := time.Now()
	if err := corpustest.WriteFile(corpus, s.Size, s.Seed); err != nil {
		return m, err
	}
	defer os.Remove(corpus)
	m.Generate = time.Since(start)
	runFile := filepath.Join(s.Dir, "run.toml")
	if err := os.WriteFile(runFile, []byte(RunFile(corpus, s.Tokenizer, s.Steps, s.DefaultLadder)), 0o644); err != nil {
		return m, err
	}
	runDir := filepath.Join(s.Dir, "run")
	steps := fmt.Sprint(s.Steps)
	verbs := [][]string{
		{"prepare", runFile, "--run", runDir, "--json"},
		{"train", runFile, "--run", runDir, "--steps", steps, "--quiet"},
		{"baselines", "--run", runDir},
		{"eval", "--run", runDir},
	}
	for i, args := range verbs {
		v := Verb{Name: args[0], Args: args}
		cctx, cancel := context.WithTimeout(ctx, s.Timeout)
		argv := append(append([]string(nil), weft...), args...)
		cmd := exec.CommandContext(cctx, argv[0], argv[1:]...)
		cmd.Env = append(os.Environ(), s.Env...)
		cmd.Dir = s.Dir
		var out tail
		cmd.Stdout = &out
		cmd.Stderr = &out
		var err error
		v.Peak, err = Run(cmd, s.Options)
		cancel()
		if err != nil {
			v.Err = fmt.Sprintf("weft %s: %v", args[0], err)
			if o := strings.TrimSpace(out.String()); o != "" {
				v.Err += ": " + o
			}
		}
		m.Verbs = append(m.Verbs, v)
		if i == 0 {
			m.RunDirBytes = treeBytes(runDir)
		}
		if err != nil {
			break
		}
	}
	return m, nil
}

// treeBytes is the size of the regular files under dir.
func treeBytes(dir string) int64 {
	var n int64
	filepath.WalkDir(dir, func(_ string, d fs.DirEntry, err error) error {
		if err == nil && d.Type().IsRegular() {
			if fi, err := d.Info(); err == nil {
				n += fi.Size()
			}
		}
		return nil
	})
	return n
}

// tail keeps the last 4 KiB written to it.
type tail struct{ b []byte }

func (t *tail) Write(p []byte) (int, error) {
	t.b = append(t.b, p...)
	if len(t.b) > 8<<10 {
		t.b = append(t.b[:0], t.b[len(t.b)-4<<10:]...)
	}
	return len(p), nil
}

func (t *tail) String() string {
	b := t.b
	if len(b) > 4<<10 {
		b = b[len(b)-4<<10:]
	}
	return string(bytes.ToValidUTF8(b, []byte("?")))
}
