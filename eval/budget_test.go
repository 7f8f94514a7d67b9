package eval

import (
	"bytes"
	"context"
	"fmt"
	"sort"
	"strings"
	"testing"
)

// mobyPrefix returns the first n characters of Moby-Dick as ids.
func mobyPrefix(t *testing.T, n int) ([]int, int) {
	t.Helper()
	seq, V := mobyDick(t)
	if len(seq) < n {
		t.Fatalf("Moby-Dick has %d characters, want %d", len(seq), n)
	}
	return seq[:n], V
}

// windowed is a TokenReader that is not IntTokens, so that the fitting
// code reads it through copies of windows, as it reads a token cache.
type windowed struct{ ids []int }

func (w windowed) Len() int                { return len(w.ids) }
func (w windowed) Read(dst []int, off int) { copy(dst, w.ids[off:off+len(dst)]) }

func countsFile(t *testing.T, c *Counts) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := WriteCounts(&b, c); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestSplitmix64 checks the mix that orders the subset's pieces against
// the published SplitMix64 generator (Steele, Lea & Flood 2014; the C
// reference splitmix64.c by S. Vigna): seeded with 1234567, its first five
// outputs, mix(seed + k·0x9E3779B97F4A7C15) for k = 1..5, are these (values
// recalled from that reference's output, and recomputed with a few lines of
// Python from the published constants).
func TestSplitmix64(t *testing.T) {
	want := []uint64{6457827717110365317, 3203168211198807973, 9817491932198370423, 4593380528125082431, 16408922859458223821}
	const seed = 1234567
	for k, w := range want {
		if got := splitmix64(seed + uint64(k+1)*0x9E3779B97F4A7C15); got != w {
			t.Errorf("output %d: got %d, want %d", k+1, got, w)
		}
	}
}

// TestCountWholeWithinBudget: a split whose counts fit the budget is
// counted whole, byte for byte as without a budget, whether it is read
// from memory or window by window.
func TestCountWholeWithinBudget(t *testing.T) {
	seq, V := mobyPrefix(t, 200_000) // three read windows and a part
	want, err := CountNGrams(seq, V, 5, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	wantFile := countsFile(t, want)
	for name, r := range map[string]TokenReader{"ints": IntTokens(seq), "windows": windowed{seq}} {
		c, err := CountNGramsOf(r, V, 5, NoBoundary, CountOptions{Memory: 1 << 30, Seed: 3})
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(countsFile(t, c), wantFile) {
			t.Errorf("%s: the counts under a budget they fit differ from the counts without one", name)
		}
		if c.Tokens() != len(seq) || c.SplitTokens() != len(seq) || c.TrainingNote() != "" {
			t.Errorf("%s: got %d of %d tokens, note %q; want all %d, no note", name, c.Tokens(), c.SplitTokens(), c.TrainingNote(), len(seq))
		}
	}
}

// TestCountSubset: under a budget the whole split would exceed, the counts
// stay within it (Counts.Bytes), say how much they counted, are the same
// for the same seed and differ for another, and equal a plain count of
// the subset the documented rule names.
func TestCountSubset(t *testing.T) {
	seq, V := mobyPrefix(t, 200_000)
	const order, piece = 4, 10_000
	for _, budget := range []int64{1 << 20, 2 << 20} {
		t.Run(fmt.Sprintf("budget=%d", budget), func(t *testing.T) {
			opts := CountOptions{Memory: budget, Seed: 7, piece: piece}
			c, err := CountNGramsOf(windowed{seq}, V, order, NoBoundary, opts)
			if err != nil {
				t.Fatal(err)
			}
			if c.Bytes() > budget {
				t.Errorf("counts take %d bytes, above the budget %d", c.Bytes(), budget)
			}
			if c.Tokens() == 0 || c.Tokens() >= len(seq) || c.SplitTokens() != len(seq) {
				t.Fatalf("got %d of %d tokens counted, want a part of %d", c.Tokens(), c.SplitTokens(), len(seq))
			}
			note := fmt.Sprintf("counts from %s of 200,000 training tokens", tokenAmount(c.Tokens()))
			if c.TrainingNote() != note {
				t.Errorf("note: got %q, want %q", c.TrainingNote(), note)
			}
			again, err := CountNGramsOf(IntTokens(seq), V, order, NoBoundary, opts)
			if err != nil {
				t.Fatal(err)
			}
			if !bytes.Equal(countsFile(t, c), countsFile(t, again)) {
				t.Error("the same seed gave different counts")
			}
			opts.Seed = 8
			other, err := CountNGramsOf(IntTokens(seq), V, order, NoBoundary, opts)
			if err != nil {
				t.Fatal(err)
			}
			if bytes.Equal(countsFile(t, c), countsFile(t, other)) {
				t.Error("seeds 7 and 8 gave the same counts")
			}
			checkPlainCounts(t, c, seq, V, order, piece, 7)
		})
	}
}

// checkPlainCounts counts, with a map of strings, the n-grams of the
// subset CountNGramsOf documents (pieces of piece tokens in the order of
// splitmix64(seed + (index+1)·0x9E3779B97F4A7C15), each padded at its
// start, until c.Tokens() tokens) and checks c holds exactly those raw
// counts.
func checkPlainCounts(t *testing.T, c *Counts, seq []int, V, order, piece int, seed uint64) {
	t.Helper()
	n := (len(seq) + piece - 1) / piece
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	key := func(i int) uint64 { return splitmix64(seed + uint64(i+1)*0x9E3779B97F4A7C15) }
	sort.Slice(idx, func(a, b int) bool { return key(idx[a]) < key(idx[b]) })
	want := map[string]int{}
	left := c.Tokens()
	for _, p := range idx {
		from, to := p*piece, min((p+1)*piece, len(seq))
		to = min(to, from+left)
		left -= to - from
		for i := from; i < to; i++ {
			for k := 0; k < order; k++ { // k tokens of context
				g := make([]int, k+1)
				for j := range g {
					pos := i - k + j
					g[j] = V // padding before the piece
					if pos >= from {
						g[j] = seq[pos]
					}
				}
				want[fmt.Sprint(g)]++
			}
		}
		if left == 0 {
			break
		}
	}
	if c.Events() != len(want) {
		t.Errorf("got %d distinct n-grams, want %d", c.Events(), len(want))
	}
	bad := 0
	for gs, cnt := range want {
		var g []int
		for _, f := range strings.Fields(strings.Trim(gs, "[]")) {
			var x int
			fmt.Sscan(f, &x)
			g = append(g, x)
		}
		ctx := int32(0)
		for j := len(g) - 2; j >= 0 && ctx >= 0; j-- {
			ctx = c.child(ctx, g[j])
		}
		got := 0
		if ctx >= 0 {
			if e := c.event(ctx, g[len(g)-1]); e >= 0 {
				got = int(c.evCount[e])
			}
		}
		if got != cnt && bad < 5 {
			bad++
			t.Errorf("n-gram %v: got count %d, want %d", g, got, cnt)
		}
	}
}

// TestCountBudgetTooSmall: a budget below an empty store is an error
// naming the budget, not empty counts.
func TestCountBudgetTooSmall(t *testing.T) {
	seq, V := mobyPrefix(t, 10_000)
	_, err := CountNGramsOf(IntTokens(seq), V, 3, NoBoundary, CountOptions{Memory: 300})
	if err == nil || !strings.Contains(err.Error(), "memory budget of 300 bytes") {
		t.Errorf("got %v, want the budget named", err)
	}
}

// TestStoreSubset: saved counts of a subset keep the split's size, and
// counts of a whole split are written as format version 2 wrote them.
func TestStoreSubset(t *testing.T) {
	seq, V := mobyPrefix(t, 50_000)
	sub, err := CountNGramsOf(IntTokens(seq), V, 3, NoBoundary, CountOptions{Memory: 256 << 10, Seed: 1, piece: 5000})
	if err != nil {
		t.Fatal(err)
	}
	if sub.SplitTokens() <= sub.Tokens() {
		t.Fatalf("got %d of %d tokens: not a subset", sub.Tokens(), sub.SplitTokens())
	}
	back, err := ReadCounts(bytes.NewReader(countsFile(t, sub)))
	if err != nil {
		t.Fatal(err)
	}
	if back.Tokens() != sub.Tokens() || back.SplitTokens() != sub.SplitTokens() || back.TrainingNote() != sub.TrainingNote() {
		t.Errorf("read back %d of %d tokens, want %d of %d", back.Tokens(), back.SplitTokens(), sub.Tokens(), sub.SplitTokens())
	}
	whole, err := CountNGrams(seq, V, 3, NoBoundary, nil)
	if err != nil {
		t.Fatal(err)
	}
	v2, err := ReadCounts(bytes.NewReader(withVersion(countsFile(t, whole), 2)))
	if err != nil {
		t.Fatalf("whole counts relabelled version 2: %v", err)
	}
	if v2.SplitTokens() != len(seq) || v2.TrainingNote() != "" {
		t.Errorf("version 2 counts: got %d of %d tokens", v2.Tokens(), v2.SplitTokens())
	}
}

// TestFitLadderNgramMemory: evaluation.ngram_memory reaches the counts of
// a fitted ladder, and the comparison's rows carry the note; the HMM does
// not read the counts and has none.
func TestFitLadderNgramMemory(t *testing.T) {
	seq, V := mobyPrefix(t, 120_000)
	train, held := seq[:100_000], seq[100_000:]
	cfg := DefaultConfig()
	cfg.NgramOrders, cfg.NgramSmoothers, cfg.MarkovOrders = []int{6}, []string{"kneser_ney"}, []int{1}
	cfg.HMMStates, cfg.HMMMaxIterations, cfg.HMMMaxTokens = []int{2}, 1, 5000
	cfg.BootstrapSamples = 0
	cfg.NgramMemory = "1MiB"
	l, err := FitLadder(context.Background(), windowed{train}, V, NoBoundary, cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	if l.Counts.Bytes() > 1<<20 || l.Counts.SplitTokens() != len(train) || l.Counts.Tokens() >= len(train) {
		t.Fatalf("counts of %d of %d tokens in %d bytes, want a subset within 1MiB", l.Counts.Tokens(), l.Counts.SplitTokens(), l.Counts.Bytes())
	}
	var models []Entrant
	for _, m := range l.Models() {
		models = append(models, Entrant{Model: m})
	}
	cmp, err := Compare(context.Background(), cfg, CompareInput{Split: "test", Validation: HeldOut{Tokens: held}, Reported: HeldOut{Tokens: held}, Models: models, Unknown: -1})
	if err != nil {
		t.Fatal(err)
	}
	note := l.Counts.TrainingNote()
	for _, r := range cmp.Rows {
		want := note
		if r.Kind == "hmm" {
			want = ""
		}
		if r.TrainingNote != want {
			t.Errorf("row %s: note %q, want %q", r.Model, r.TrainingNote, want)
		}
	}
}

func TestParseSize(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want int64
		ok   bool
	}{
		{"0", 0, true},
		{"1GiB", 1 << 30, true},
		{"500 MB", 500_000_000, true},
		{"1.5GB", 1_500_000_000, true},
		{"64KiB", 65536, true},
		{"2048", 2048, true},
		{"12kB", 12000, true},
		{"", 0, false},
		{"GiB", 0, false},
		{"1 gib", 0, false},
		{"-1GiB", 0, false},
		{"1e3MB", 0, false},
		{"9999999TiB", 0, false},
	} {
		got, err := ParseSize(tc.in)
		if (err == nil) != tc.ok || got != tc.want {
			t.Errorf("ParseSize(%q): got %d, %v; want %d, ok %v", tc.in, got, err, tc.want, tc.ok)
		}
	}
	cfg := DefaultConfig()
	for _, bad := range []string{"lots", "512KiB"} {
		cfg.NgramMemory = bad
		if err := cfg.Validate(); err == nil || !strings.Contains(err.Error(), "ngram_memory") || strings.Contains(err.Error(), "\n") {
			t.Errorf("ngram_memory %q: got %v, want one line naming the key", bad, err)
		}
	}
}

// TestCountSubsetByHand works the budget rule through by hand on ten
// tokens over V = 3 (padding symbol 3), order 2, pieces of 4 tokens:
// p0 = 0 1 0 1, p1 = 2 2 2 2, p2 = 1 0. The store starts with two hash
// tables of 16 slots (384 bytes) and the empty context; before each token
// the test is 384 + 45·(C+1) + 16·(E+2) <= 700 for C contexts and E
// events so far (Counts.Bytes: 12 bytes a slot, 45 a context, 16 an
// event; no table reaches 12 entries, 3/4 of 16, so none grows).
//
// In split order, tokens 0, 1, 0 test 506, 583, 660 and leave C = 4,
// E = 5; the fourth tests 721 > 700: the split does not fit. For seed 5
// the keys splitmix64(5 + (i+1)·0x9E3779B97F4A7C15) of pieces 0, 1, 2 are
// 7134611160154358618, 13877614986023876344 and 4292726422858613063
// (computed with a few lines of Python from the mix TestSplitmix64
// checks), so the pieces go p2, p0, p1. The subset counts p2: "1" (506),
// "0" (583); then p0 from fresh padding: "0" (660), "1" (676); the next
// "0" tests 384 + 45·5 + 16·8 = 737 > 700 and stops. So 4 of 10 tokens, the
// unigrams 0 and 1 twice each, the bigrams (3 1), (1 0), (3 0), (0 1) once
// each: E = 6, C = 4 (the empty context, "3", "1", "0"), Bytes = 384 +
// 180 + 96 = 660.
func TestCountSubsetByHand(t *testing.T) {
	seq := []int{0, 1, 0, 1, 2, 2, 2, 2, 1, 0}
	if got := subsetPieces(len(seq), 4, 5); fmt.Sprint(got) != "[2 0 1]" {
		t.Fatalf("pieces for seed 5: got %v, want [2 0 1]", got)
	}
	c, err := CountNGramsOf(IntTokens(seq), 3, 2, NoBoundary, CountOptions{Memory: 700, Seed: 5, piece: 4})
	if err != nil {
		t.Fatal(err)
	}
	if c.Tokens() != 4 || c.SplitTokens() != 10 || c.Events() != 6 || c.Contexts() != 4 || c.Bytes() != 660 {
		t.Errorf("got %d of %d tokens, %d events, %d contexts, %d bytes; want 4 of 10, 6, 4, 660",
			c.Tokens(), c.SplitTokens(), c.Events(), c.Contexts(), c.Bytes())
	}
	if c.TrainingNote() != "counts from 4 of 10 training tokens" {
		t.Errorf("note %q", c.TrainingNote())
	}
	for _, g := range []struct {
		gram []int
		want int
	}{{[]int{0}, 2}, {[]int{1}, 2}, {[]int{2}, 0}, {[]int{3, 1}, 1}, {[]int{1, 0}, 1}, {[]int{3, 0}, 1}, {[]int{0, 1}, 1}, {[]int{2, 2}, 0}} {
		ctx := int32(0)
		if len(g.gram) == 2 {
			ctx = c.child(0, g.gram[0])
		}
		got := 0
		if ctx >= 0 {
			if e := c.event(ctx, g.gram[len(g.gram)-1]); e >= 0 {
				got = int(c.evCount[e])
			}
		}
		if got != g.want {
			t.Errorf("count of %v: got %d, want %d", g.gram, got, g.want)
		}
	}
}
