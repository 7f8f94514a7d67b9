package rnn

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"testing"

	"weft/rnn/linalg"
)

// streamBatches cuts a token sequence into B contiguous streams and yields
// windows of T steps over them, as the data package does.
type streamBatches struct {
	tokens []int
	B, T   int
	pos    int // step within each stream
	limit  int // windows to yield; 0 means until the text runs out
	n      int
	reset  bool // set Reset on stream 0 of every third window
}

func (s *streamBatches) Next(ctx context.Context) (Window, error) {
	span := (len(s.tokens) - 1) / s.B
	if s.pos+s.T > span || (s.limit > 0 && s.n >= s.limit) {
		return Window{}, io.EOF
	}
	w := Window{B: s.B, T: s.T, Inputs: make([]int, s.B*s.T), Targets: make([]int, s.B*s.T)}
	for t := 0; t < s.T; t++ {
		for b := 0; b < s.B; b++ {
			i := b*span + s.pos + t
			w.Inputs[t*s.B+b] = s.tokens[i]
			w.Targets[t*s.B+b] = s.tokens[i+1]
		}
	}
	if s.reset && s.n%3 == 2 {
		w.Reset = make([]bool, s.B)
		w.Reset[0] = true
	}
	s.pos += s.T
	s.n++
	return w, nil
}

func randomTokens(n, vocab int, seed uint64) []int {
	rng := rand.New(rand.NewPCG(seed, 5))
	out := make([]int, n)
	// A little structure (token i often follows i−1) so training has
	// something to learn.
	for i := range out {
		if i > 0 && rng.IntN(3) > 0 {
			out[i] = (out[i-1] + 1) % vocab
		} else {
			out[i] = rng.IntN(vocab)
		}
	}
	return out
}

func smallConfigs() map[string]Config {
	out := map[string]Config{}
	for _, cell := range []string{"rnn", "gru", "lstm"} {
		c := DefaultConfig()
		c.Cell, c.Layers, c.HiddenSize, c.EmbeddingSize, c.Dropout = cell, 2, 16, 8, 0.2
		out[cell] = c
	}
	c := out["lstm"] // the class-based output layer: 3 classes of the 12 ids
	c.OutputLayer = "class"
	out["lstm-class"] = c
	return out
}

// train runs steps windows and returns every StepInfo and the final
// parameter values.
func trainRun(t *testing.T, cfg Config, tc TrainConfig, tokens []int, steps int, pool *linalg.Pool) ([]StepInfo, []float32) {
	t.Helper()
	m, err := NewModel[float32](cfg, 12, tc.Seed)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := NewTrainer(m, tc, pool)
	if err != nil {
		t.Fatal(err)
	}
	var infos []StepInfo
	b := &streamBatches{tokens: tokens, B: tc.BatchSize, T: tc.UnrollSteps, limit: steps, reset: true}
	if tc.BPTTAdvanceSteps > 0 {
		b.T = tc.BPTTAdvanceSteps
	}
	err = tr.Run(context.Background(), b, func(_ context.Context, s StepInfo) error {
		infos = append(infos, s)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return infos, append([]float32(nil), m.values...)
}

func sameBits(a, b []float32) int {
	for i := range a {
		if math.Float32bits(a[i]) != math.Float32bits(b[i]) {
			return i
		}
	}
	return -1
}

// TestDeterminism checks that one seed gives identical bits run to run and
// whatever the thread count (the kernels split work over outputs, never
// over a reduction).
//
// The shape is chosen so that products are split over both threads: for
// every cell the recurrent-weight gradient (G × H × B·T = 256 rows, G ≥ 64)
// and for GRU and LSTM the input product (256 × G × E = 32) reach linalg's
// threshold of 2^20 multiply-adds for splitting.
func TestDeterminism(t *testing.T) {
	tokens := randomTokens(30000, 12, 3)
	tc := DefaultTrainConfig()
	tc.BatchSize, tc.UnrollSteps, tc.Seed = 8, 32, 9
	p2 := linalg.NewPool(2)
	defer p2.Close()
	for name, cfg := range smallConfigs() {
		cfg.HiddenSize, cfg.EmbeddingSize = 64, 32
		t.Run(name, func(t *testing.T) {
			i1, v1 := trainRun(t, cfg, tc, tokens, 8, nil)
			i2, v2 := trainRun(t, cfg, tc, tokens, 8, nil)
			i3, v3 := trainRun(t, cfg, tc, tokens, 8, p2)
			if len(i1) != 8 {
				t.Fatalf("got %d steps, want 8", len(i1))
			}
			for _, other := range []struct {
				what  string
				infos []StepInfo
				vals  []float32
			}{{"second run", i2, v2}, {"2 threads", i3, v3}} {
				if k := sameBits(v1, other.vals); k >= 0 {
					t.Errorf("%s: parameter %d differs: %v vs %v", other.what, k, v1[k], other.vals[k])
				}
				for s := range i1 {
					if i1[s] != other.infos[s] {
						t.Errorf("%s: step %d info %+v vs %+v", other.what, s, other.infos[s], i1[s])
					}
				}
			}
			// A different seed gives different weights (the check can fail).
			tc2 := tc
			tc2.Seed = 10
			_, v4 := trainRun(t, cfg, tc2, tokens, 1, nil)
			if sameBits(v1, v4) < 0 {
				t.Error("seed 10 gave the same parameters as seed 9")
			}
		})
	}
}

// TestResume checks the exported trainer state: N steps, export (through
// JSON for the scalars), import into a fresh model and trainer, N more
// steps must equal 2N steps straight, bit for bit.
func TestResume(t *testing.T) {
	tokens := randomTokens(6000, 12, 4)
	for _, opt := range []string{"sgd", "adagrad", "rmsprop", "adam", "adamw"} {
		for _, advance := range []int{0, 4} {
			cfg := smallConfigs()["lstm"]
			tc := DefaultTrainConfig()
			tc.Optimizer, tc.BatchSize, tc.UnrollSteps, tc.Seed, tc.BPTTAdvanceSteps = opt, 3, 10, 5, advance
			tc.Momentum, tc.Schedule, tc.DecayEverySteps = 0.5, "step", 3
			if opt != "sgd" {
				tc.Momentum = 0
			}
			name := opt
			if advance > 0 {
				name += "/bptt_advance_steps=4"
			}
			t.Run(name, func(t *testing.T) { checkResume(t, cfg, tc, tokens, 5) })
		}
	}
}

// checkResume trains n steps, exports the trainer (the scalars through
// JSON), imports it into a fresh model and trainer with other weights, and
// trains n more: the parameters must equal those of 2n straight steps, bit
// for bit.
func checkResume(t *testing.T, cfg Config, tc TrainConfig, tokens []int, n int) {
	t.Helper()
	_, straight := trainRun(t, cfg, tc, tokens, 2*n, nil)
	T := tc.UnrollSteps
	if tc.BPTTAdvanceSteps > 0 {
		T = tc.BPTTAdvanceSteps
	}
	b := &streamBatches{tokens: tokens, B: tc.BatchSize, T: T, reset: true}
	m1, _ := NewModel[float32](cfg, 12, tc.Seed)
	tr1, _ := NewTrainer(m1, tc, nil)
	ctx := context.Background()
	for i := 0; i < n; i++ {
		w, _ := b.Next(ctx)
		if _, err := tr1.Step(ctx, w); err != nil {
			t.Fatal(err)
		}
	}
	js, err := json.Marshal(tr1.State())
	if err != nil {
		t.Fatal(err)
	}
	m2, _ := NewModel[float32](cfg, 12, 12345) // other weights, overwritten below
	tr2, _ := NewTrainer(m2, tc, nil)
	restoreTrainer(t, m2, tr2, m1, tr1, js)
	for i := 0; i < n; i++ {
		w, _ := b.Next(ctx)
		if _, err := tr2.Step(ctx, w); err != nil {
			t.Fatal(err)
		}
	}
	if k := sameBits(straight, m2.values); k >= 0 {
		t.Errorf("parameter %d after resume: %v, straight run %v", k, m2.values[k], straight[k])
	}
}

// restoreTrainer resumes dst from src as a checkpoint would: the
// parameters and state tensors copied by position (their names must
// agree), then the scalar state from its JSON form js.
func restoreTrainer(t *testing.T, dstM *Model[float32], dst *Trainer[float32], srcM *Model[float32], src *Trainer[float32], js []byte) {
	t.Helper()
	for i, p := range srcM.Params() {
		copy(dstM.Params()[i].Value, p.Value)
	}
	for i, st := range src.StateTensors() {
		if dst.StateTensors()[i].Name != st.Name {
			t.Fatalf("state tensor %d: %s vs %s", i, dst.StateTensors()[i].Name, st.Name)
		}
		copy(dst.StateTensors()[i].Value, st.Value)
	}
	var st TrainerState
	if err := json.Unmarshal(js, &st); err != nil {
		t.Fatal(err)
	}
	if err := dst.SetState(st); err != nil {
		t.Fatal(err)
	}
}

// TestSteadyStateAllocs checks that a training window, and a sampling
// step, allocate nothing once the buffers exist, on 1, 2, 16, 32 and 64
// threads (issue 17: threads above the core count still run every
// per-thread path). With threads the shape is large enough for products to
// be split (see TestDeterminism). rnn/linalg's TestGemmManyPackersNoAllocs
// forces every part of a product to hold its buffers at once, which a
// machine with fewer cores than threads does only by chance.
func TestSteadyStateAllocs(t *testing.T) {
	pools := []*linalg.Pool{nil, linalg.NewPool(2), linalg.NewPool(16), linalg.NewPool(32), linalg.NewPool(64)}
	defer func() {
		for _, p := range pools {
			p.Close()
		}
	}()
	for name, cfg := range smallConfigs() {
		t.Run(name, func(t *testing.T) {
			for _, pool := range pools {
				c := cfg
				tc := DefaultTrainConfig()
				tc.BatchSize, tc.UnrollSteps = 4, 8
				if pool != nil {
					c.HiddenSize, c.EmbeddingSize, tc.BatchSize, tc.UnrollSteps = 64, 32, 8, 32
				}
				m, _ := NewModel[float32](c, 12, 1)
				tr, _ := NewTrainer(m, tc, pool)
				b := &streamBatches{tokens: randomTokens(100000, 12, 1), B: tc.BatchSize, T: tc.UnrollSteps}
				w, _ := b.Next(context.Background())
				ctx := context.Background()
				// Steady state: a few windows first, so that every cache
				// (the kernels' workspaces, the runtime's per-thread wait
				// records of the pool's goroutines) has reached its size.
				for range 3 {
					if _, err := tr.Step(ctx, w); err != nil {
						t.Fatal(err)
					}
				}
				// The fewest of three measurements: on a loaded machine
				// the runtime may allocate for its own scheduling (a new
				// thread's wait records) during one of them, while an
				// allocation of the step itself recurs in every one.
				allocs := math.Inf(1)
				for try := 0; try < 3 && allocs != 0; try++ {
					allocs = min(allocs, testing.AllocsPerRun(5, func() {
						if _, err := tr.Step(ctx, w); err != nil {
							t.Fatal(err)
						}
					}))
				}
				if allocs != 0 {
					t.Errorf("Trainer.Step on %d threads: %v allocations per window, want 0", pool.Threads(), allocs)
				}
			}
			m, _ := NewModel[float32](cfg, 12, 1)
			s := m.NewStream(3)
			lp := make([]float64, 3*12)
			toks := []int{1, 2, 3}
			if allocs := testing.AllocsPerRun(5, func() {
				_ = s.Feed(toks)
				s.LogProbs(lp)
				_ = s.Select([]int{2, 0, 0})
			}); allocs != 0 {
				t.Errorf("Stream: %v allocations per token, want 0", allocs)
			}
		})
	}
}

func TestWindowErrors(t *testing.T) {
	cfg := smallConfigs()["gru"]
	trc := DefaultTrainConfig()
	trc.BatchSize, trc.UnrollSteps = 2, 4
	m, _ := NewModel[float32](cfg, 12, 1)
	tr, _ := NewTrainer(m, trc, nil)
	ok := Window{B: 2, T: 2, Inputs: []int{1, 2, 3, 4}, Targets: []int{2, 3, 4, 5}}
	bad := []struct {
		name string
		win  Window
		want string
	}{
		{"streams", Window{B: 3, T: 2}, "window has 3 streams, training.batch_size is 2"},
		{"steps", Window{B: 2, T: 5}, "window has 5 steps, want 1 to training.unroll_steps (4)"},
		{"length", Window{B: 2, T: 2, Inputs: []int{1}, Targets: ok.Targets}, "window of 2×2 has 1 inputs and 4 targets"},
		{"token", Window{B: 2, T: 2, Inputs: []int{1, 2, 12, 4}, Targets: ok.Targets}, "window input at step 1, stream 0 is token 12, outside the vocabulary 0..11"},
	}
	for _, tc := range bad {
		if _, err := tr.Step(context.Background(), tc.win); err == nil || err.Error() != tc.want {
			t.Errorf("%s: got %v, want %q", tc.name, err, tc.want)
		}
	}
	if tr.Steps() != 0 {
		t.Errorf("bad windows made %d updates", tr.Steps())
	}
	info, err := tr.Step(context.Background(), ok)
	if err != nil || info.Step != 1 || info.Tokens != 4 || !(info.GradNorm > 0) {
		t.Errorf("good window: %+v, %v", info, err)
	}
	// Scaling the rate (a divergence guard's move) shows in the next step
	// and in the state.
	if err := tr.ScaleLearningRate(0.5); err != nil {
		t.Fatal(err)
	}
	info, err = tr.Step(context.Background(), ok)
	if err != nil || info.LearningRate != trc.LearningRate/2 || tr.State().Schedule.Scale != 0.5 || tr.Tokens() != 8 {
		t.Errorf("after ScaleLearningRate(0.5): rate %v (want %v), state scale %v, tokens %d, err %v",
			info.LearningRate, trc.LearningRate/2, tr.State().Schedule.Scale, tr.Tokens(), err)
	}
	// A non-finite weight gives ErrNonFinite and no update.
	m.Params()[len(m.Params())-1].Value[0] = float32(math.Inf(1)) // output.bias
	if _, err := tr.Step(context.Background(), ok); !errors.Is(err, ErrNonFinite) {
		t.Errorf("infinite weight: got %v, want ErrNonFinite", err)
	}
	// Absurd sizes are errors, not crashes.
	huge := DefaultConfig()
	huge.HiddenSize = 1 << 40
	if _, err := NewModel[float32](huge, 10, 1); err == nil {
		t.Error("NewModel accepted hidden_size 2^40")
	}
	big := DefaultTrainConfig()
	big.BatchSize, big.UnrollSteps = 1<<20, 1<<20
	if _, err := NewTrainer(m, big, nil); err == nil {
		t.Error("NewTrainer accepted a 2^40-position window")
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := tr.Run(ctx, &streamBatches{tokens: randomTokens(100, 12, 1), B: 2, T: 4}, nil); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled Run: got %v", err)
	}
}
