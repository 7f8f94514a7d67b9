package main

import (
	"bufio"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/serve"
	"weft/eval/surprise"
)

func TestServeFlags(t *testing.T) {
	var got *serveOptions
	cmd := newServeCmd(&deps{}, func(o *serveOptions) error { got = o; return nil })
	cmd.SetArgs([]string{"--run", "r", "--max-line-chars", "80", "--max-streams", "9", "--batch-wait", "2ms"})
	if err := cmd.Execute(); err != nil {
		t.Fatal(err)
	}
	// The default address is the loopback one.
	if got.Run != "r" || got.Listen != "127.0.0.1:8750" || got.Limits.MaxLineChars != 80 || got.Limits.MaxStreams != 9 ||
		got.Limits.BatchWait != 2*time.Millisecond || got.Limits.MaxBatchLines != serve.DefaultLimits().MaxBatchLines {
		t.Errorf("got %+v", got)
	}
}

func TestServeUsageErrors(t *testing.T) {
	r := newDecodeRun(t, "line")
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"serve"}, "give --run DIR or --checkpoint FILE"},
		{[]string{"serve", "--run", r.Dir, "--listen", "8750"}, "want HOST:PORT"},
		{[]string{"serve", "--run", r.Dir, "--max-streams", "0"}, "--max-streams must be at least 1"},
		{[]string{"serve", "--run", r.Dir, "extra"}, "takes no arguments"},
	} {
		code, _, stderr := runCmd(t, "", tc.args...)
		if code != exitUsage || !strings.Contains(stderr, tc.want) {
			t.Errorf("%v: exit %d, stderr %q; want %d with %q", tc.args, code, stderr, exitUsage, tc.want)
		}
	}
	code, _, stderr := runCmd(t, "", "serve", "--checkpoint", filepath.Join(r.Dir, "nothing.ckpt"))
	if code != exitFailure || !strings.Contains(stderr, "nothing.ckpt") || strings.Count(stderr, "\n") != 1 {
		t.Errorf("missing checkpoint: exit %d, stderr %q", code, stderr)
	}
}

// childLines passes the lines of a child's standard error to a channel.
func childLines(r *bufio.Reader) <-chan string {
	ch := make(chan string, 64)
	go func() {
		defer close(ch)
		for {
			line, err := r.ReadString('\n')
			if line != "" {
				ch <- line
			}
			if err != nil {
				return
			}
		}
	}()
	return ch
}

func waitLine(t *testing.T, ch <-chan string, marker string) string {
	t.Helper()
	timeout := time.After(60 * time.Second)
	for {
		select {
		case line, ok := <-ch:
			if !ok {
				t.Fatalf("standard error ended before %q", marker)
			}
			if strings.Contains(line, marker) {
				return line
			}
		case <-timeout:
			t.Fatalf("no %q within a minute", marker)
		}
	}
}

// TestServeProcess runs weft serve as a child process on loopback and
// checks its answers against weft score and weft sample on the same
// inputs (the numbers those commands print, rounded to 6 decimals as they
// print them), then a reload by SIGHUP and a drain by SIGTERM.
func TestServeProcess(t *testing.T) {
	r := newDecodeRun(t, "line")
	child, stderr := weftChild(t, 0, "serve", "--run", r.Dir, "--listen", "127.0.0.1:0")
	defer child.Process.Kill()
	lines := childLines(stderr)
	ready := waitLine(t, lines, "serving ")
	i := strings.Index(ready, "http://")
	if i < 0 {
		t.Fatalf("no address in %q", ready)
	}
	c := serve.NewClient(strings.Fields(ready[i:])[0])
	ctx := context.Background()

	text := []string{"the cat sat.", "a dog met the mat on a log.", "the end."}
	file := filepath.Join(t.TempDir(), "log.txt")
	if err := os.WriteFile(file, []byte(strings.Join(text, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	cliRows := func(args ...string) []surprise.Row {
		code, out, errs := runCmd(t, "", append([]string{"score", "--run", r.Dir, "--json", file}, args...)...)
		if code != exitOK {
			t.Fatalf("weft score: exit %d: %s", code, errs)
		}
		var rows []surprise.Row
		for _, l := range strings.Split(strings.TrimSpace(out), "\n") {
			var row surprise.Row
			if err := json.Unmarshal([]byte(l), &row); err != nil {
				t.Fatal(err)
			}
			rows = append(rows, row)
		}
		return rows
	}
	same := func(what string, got []serve.ScoredLine, want []surprise.Row) {
		t.Helper()
		if len(got) != len(want) {
			t.Fatalf("%s: %d rows, want %d", what, len(got), len(want))
		}
		for k := range want {
			g, w := got[k].Row, want[k]
			g.Bits, g.BitsPerChar, g.SurpriseBits = round6(g.Bits), round6(g.BitsPerChar), round6(g.SurpriseBits)
			g.Source, g.Seq = w.Source, w.Seq
			if g != w {
				t.Errorf("%s line %d: service %+v, weft score %+v", what, k+1, g, w)
			}
		}
	}
	plain, err := c.Score(ctx, serve.ScoreRequest{Lines: text})
	if err != nil {
		t.Fatal(err)
	}
	same("plain", plain.Rows, cliRows())
	var streamed []serve.ScoredLine
	for _, l := range text {
		row, err := c.ScoreLine(ctx, l, "log")
		if err != nil {
			t.Fatal(err)
		}
		streamed = append(streamed, row)
	}
	same("stream", streamed, cliRows("--context", "100000"))

	got, err := c.Sample(ctx, serve.SampleRequest{Prompt: "the ", Length: "30", Samples: 2, Seed: ptrU64(7), Temperature: ptrF64(0.9), TopK: 8})
	if err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCmd(t, "", "sample", "--run", r.Dir, "--prompt", "the ", "--length", "30", "--samples", "2", "--seed", "7", "--temperature", "0.9", "--top-k", "8", "--json")
	if code != exitOK {
		t.Fatalf("weft sample: exit %d: %s", code, errs)
	}
	for k, l := range strings.Split(strings.TrimSpace(out), "\n") {
		var want sampleJSON
		if err := json.Unmarshal([]byte(l), &want); err != nil {
			t.Fatal(err)
		}
		g := got.Samples[k]
		if g.Text != want.Text || g.Stop != want.Stop || round6(g.LogProb) != want.LogProb || len(g.Tokens) != len(want.Tokens) {
			t.Errorf("sample %d: service %q %s %v, weft sample %q %s %v", k+1, g.Text, g.Stop, g.LogProb, want.Text, want.Stop, want.LogProb)
		}
	}

	// SIGHUP reloads the run's best checkpoint, here replaced by one
	// with another output bias.
	for _, p := range r.Net.Params() {
		if p.Name == "output.bias" {
			p.Value[3] += 2
		}
	}
	f, err := checkpoint.NewModelFile(r.Net, r.Net.Config(), r.Vocab, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := checkpoint.Save(r.Ckpt, f); err != nil {
		t.Fatal(err)
	}
	child.Process.Signal(syscall.SIGHUP)
	waitLine(t, lines, "reloaded ")
	if facts, err := c.Model(ctx); err != nil || facts.Generation != 2 {
		t.Errorf("after SIGHUP: generation %d, %v; want 2", facts.Generation, err)
	}
	after, err := c.Score(ctx, serve.ScoreRequest{Lines: text})
	if err != nil {
		t.Fatal(err)
	}
	same("after reload", after.Rows, cliRows())

	child.Process.Signal(syscall.SIGTERM)
	waitLine(t, lines, "drained, exiting")
	if err := child.Wait(); err != nil {
		t.Errorf("weft serve after SIGTERM: %v, want exit 0", err)
	}
}

func ptrU64(v uint64) *uint64   { return &v }
func ptrF64(v float64) *float64 { return &v }
