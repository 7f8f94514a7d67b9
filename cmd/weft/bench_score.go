package main

import (
	"fmt"
	"io"
	"os"
	"runtime"
	"slices"
	"strings"
	"text/tabwriter"
	"time"

	"weft/configs"
	"weft/data"
	"weft/eval/surprise"
	"weft/rnn"
	"weft/rnn/bench"
	"weft/rnn/linalg"
)

// benchScoreRound is one round of bench --score: training windows and one
// scoring of the file, timed separately, one right after the other.
type benchScoreRound struct {
	TrainTokens          int64   `json:"train_tokens"`
	TrainSeconds         float64 `json:"train_seconds"`
	TrainTokensPerSecond float64 `json:"train_tokens_per_second"`
	ScoreTokens          int64   `json:"score_tokens"`
	ScoreCharacters      int64   `json:"score_characters"`
	ScoreSeconds         float64 `json:"score_seconds"`
	ScoreTokensPerSecond float64 `json:"score_tokens_per_second"`
	Ratio                float64 `json:"score_over_train"` // scoring tokens/s over training tokens/s

	// Processor time of the process (all threads) in each part, and the
	// ratio of tokens per processor-second; zero where the system does
	// not say.
	TrainCPUSeconds float64 `json:"train_cpu_seconds,omitempty"`
	ScoreCPUSeconds float64 `json:"score_cpu_seconds,omitempty"`
	CPURatio        float64 `json:"score_over_train_cpu,omitempty"`
}

// benchScoreReport is what bench --score measured; its JSON form is for
// scripts.
type benchScoreReport struct {
	Model         bench.Shape       `json:"model"`
	File          string            `json:"file"`
	Lines         int               `json:"lines"`
	WarmupWindows int               `json:"warmup_windows"`
	Windows       int               `json:"windows_per_round"`
	Rounds        []benchScoreRound `json:"rounds"`
	RatioMin      float64           `json:"ratio_min"`
	RatioMedian   float64           `json:"ratio_median"`
	RatioMax      float64           `json:"ratio_max"`
	LoadStart     string            `json:"load_start,omitempty"` // /proc/loadavg where there is one
	LoadEnd       string            `json:"load_end,omitempty"`
}

// benchScore measures training and `weft score` side by side on one model
// and thread count: the model of r with the vocabulary of the file (learnt
// with the run file's data settings), trained on synthetic windows of ids
// below that vocabulary, and the file scored line by line exactly as weft
// score scores it (surprise.Scorer, --threads pieces at once, one thread
// each, the rows formatted as its tab-separated output and discarded).
// The rounds alternate which of the two goes first.
func benchScore(opts *benchOptions, r *configs.Run) (*benchScoreReport, error) {
	ctx := opts.ctx
	f, err := os.Open(opts.Score)
	if err != nil {
		return nil, fmt.Errorf("bench --score %s: %w", opts.Score, unwrapPath(err))
	}
	d := r.Data
	v, err := data.LearnVocab(ctx, f, opts.Score, data.VocabOptions{Tokenizer: d.Tokenizer, Lowercase: d.Lowercase,
		BPEMerges: d.BPEMerges, MinCount: d.MinCount, MaxVocabulary: d.MaxVocabulary, Boundary: d.Boundary})
	f.Close()
	if err != nil {
		return nil, fmt.Errorf("bench --score %s: %w", opts.Score, err)
	}
	tc := r.Training.TrainConfig
	V := v.Len()
	net, err := rnn.NewModel[float32](r.Model, V, tc.Seed)
	if err != nil {
		return nil, err
	}
	pool := linalg.NewPool(tc.Threads)
	defer pool.Close()
	tr, err := rnn.NewTrainer(net, tc, pool)
	if err != nil {
		return nil, err
	}
	T := tc.UnrollSteps
	if tc.BPTTAdvanceSteps > 0 {
		T = tc.BPTTAdvanceSteps
	}
	wins := bench.Windows(V, tc.BatchSize, T, opts.Warmup+opts.Rounds*opts.Windows, tc.Seed)
	net.SetPool(pool)
	for _, w := range wins[:opts.Warmup] {
		if _, err := tr.Step(ctx, w); err != nil {
			return nil, err
		}
	}
	wins = wins[opts.Warmup:]

	rep := &benchScoreReport{
		Model: bench.NewShape(net, r.Model, r.Training.TrainConfig, V, tc.BatchSize, tc.UnrollSteps, tc.Threads),
		File:  opts.Score, WarmupWindows: opts.Warmup, Windows: opts.Windows,
		LoadStart: loadAverage(),
	}
	train := func(round *benchScoreRound, ws []rnn.Window) error {
		net.SetPool(pool)
		c0, _ := processCPU()
		t0 := time.Now()
		for _, w := range ws {
			info, err := tr.Step(ctx, w)
			if err != nil {
				return err
			}
			round.TrainTokens += int64(info.Tokens)
		}
		round.TrainSeconds = time.Since(t0).Seconds()
		if c1, ok := processCPU(); ok {
			round.TrainCPUSeconds = (c1 - c0).Seconds()
		}
		return nil
	}
	score := func(round *benchScoreRound) error {
		// As weft score runs a loaded model: no pool, one piece per
		// thread.
		net.SetPool(nil)
		lines := 0
		sink := &rowSink{opts: &scoreOptions{cmdContext: cmdContext{ctx, &deps{Out: io.Discard}}}}
		c0, _ := processCPU()
		t0 := time.Now()
		u, err := surprise.New(net, "rnn", v, surprise.Options{Unit: surprise.Line, MaxChars: 64 << 10, Workers: tc.Threads},
			func(row surprise.Row) error {
				lines++
				round.ScoreTokens += int64(row.Tokens)
				round.ScoreCharacters += int64(row.Characters)
				return sink.add(row)
			})
		if err != nil {
			return err
		}
		f, err := os.Open(opts.Score)
		if err != nil {
			return fmt.Errorf("bench --score %s: %w", opts.Score, unwrapPath(err))
		}
		defer f.Close()
		if _, err := u.Score(ctx, f, opts.Score); err != nil {
			return err
		}
		if err := u.Flush(); err != nil {
			return err
		}
		if err := sink.close(); err != nil {
			return err
		}
		round.ScoreSeconds = time.Since(t0).Seconds()
		if c1, ok := processCPU(); ok {
			round.ScoreCPUSeconds = (c1 - c0).Seconds()
		}
		rep.Lines = lines
		return nil
	}
	for i := 0; i < opts.Rounds; i++ {
		var round benchScoreRound
		ws := wins[i*opts.Windows : (i+1)*opts.Windows]
		first, second := func() error { return train(&round, ws) }, func() error { return score(&round) }
		if i%2 == 1 {
			first, second = second, first
		}
		if err := first(); err != nil {
			return nil, err
		}
		if err := second(); err != nil {
			return nil, err
		}
		round.TrainTokensPerSecond = float64(round.TrainTokens) / round.TrainSeconds
		round.ScoreTokensPerSecond = float64(round.ScoreTokens) / round.ScoreSeconds
		round.Ratio = round.ScoreTokensPerSecond / round.TrainTokensPerSecond
		if round.TrainCPUSeconds > 0 && round.ScoreCPUSeconds > 0 {
			round.CPURatio = float64(round.ScoreTokens) / round.ScoreCPUSeconds / (float64(round.TrainTokens) / round.TrainCPUSeconds)
		}
		rep.Rounds = append(rep.Rounds, round)
	}
	rep.LoadEnd = loadAverage()
	ratios := make([]float64, len(rep.Rounds))
	for i, round := range rep.Rounds {
		ratios[i] = round.Ratio
	}
	rep.RatioMin, rep.RatioMax = slices.Min(ratios), slices.Max(ratios)
	rep.RatioMedian = bench.Median(ratios)
	return rep, nil
}

// loadAverage is the first three fields of /proc/loadavg, or "" where the
// system has none.
func loadAverage() string {
	if runtime.GOOS != "linux" {
		return ""
	}
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return ""
	}
	fs := strings.Fields(string(b))
	if len(fs) < 3 {
		return ""
	}
	return strings.Join(fs[:3], " ")
}

func runBenchScore(opts *benchOptions, r *configs.Run) error {
	rep, err := benchScore(opts, r)
	if err != nil {
		return err
	}
	if opts.JSON {
		return writeJSON(opts.Out, rep)
	}
	printBenchScore(opts.Out, rep)
	return nil
}

func printBenchScore(w io.Writer, r *benchScoreReport) {
	m := r.Model
	fmt.Fprintf(w, "model     %s %d×%d, vocabulary %d (of %s), embedding %d, %s parameters, %d thread(s)\n",
		m.Cell, m.Layers, m.Hidden, m.Vocab, r.File, m.Embedding, thousands(int64(m.Parameters)), m.Threads)
	fmt.Fprintf(w, "training  %d windows of %d streams × %d steps per round after %d untimed (forward, backward, update)\n",
		r.Windows, m.Batch, m.Unroll, r.WarmupWindows)
	fmt.Fprintf(w, "scoring   %s, %d lines, each from a fresh state, as weft score --threads %d scores it\n", r.File, r.Lines, m.Threads)
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "round\ttraining tokens/s\tscoring tokens/s\tscoring characters/s\tscoring / training\tby processor time\t")
	for i, round := range r.Rounds {
		cpu := "-"
		if round.CPURatio > 0 {
			cpu = fmt.Sprintf("%.2f", round.CPURatio)
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%.2f\t%s\t\n", i+1, thousands(int64(round.TrainTokensPerSecond+0.5)),
			thousands(int64(round.ScoreTokensPerSecond+0.5)), thousands(int64(float64(round.ScoreCharacters)/round.ScoreSeconds+0.5)), round.Ratio, cpu)
	}
	tw.Flush()
	fmt.Fprintln(w)
	fmt.Fprintf(w, "ratio     scoring / training %.2f (median of %d rounds; %.2f to %.2f)\n", r.RatioMedian, len(r.Rounds), r.RatioMin, r.RatioMax)
	fmt.Fprintf(w, "          by processor time: tokens per processor-second of the process, which other jobs taking\n")
	fmt.Fprintf(w, "          turns on the cores change less (with several threads it also counts the time they wait)\n")
	if r.LoadStart != "" {
		fmt.Fprintf(w, "load      %s at the start, %s at the end (1, 5 and 15 minute averages)\n", r.LoadStart, r.LoadEnd)
	}
}
