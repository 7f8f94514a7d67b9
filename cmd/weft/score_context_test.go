package main

import (
	"context"
	"math"
	"strings"
	"testing"
)

// TestScoreContext checks --context N: each line is scored after the model
// ran over the N tokens before it in the same file (not counted), exactly as
// LogProbs of context+line gives, and a new file starts with no context.
func TestScoreContext(t *testing.T) {
	r := newDecodeRun(t, "")
	lines := []string{"a cat sat.\n", "the dog met the log.\n", "on a mat\n"}
	text := strings.Join(lines, "")
	const ctxTokens = 6
	path := writeTemp(t, "in.txt", text)
	code, out, stderr := runCmd(t, "", "score", "--checkpoint", r.Ckpt, "--json", "--context", "6", path, path)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	rows := parseRows(t, out)
	if len(rows) != 6 {
		t.Fatalf("got %d rows, want 6", len(rows))
	}
	all := r.Vocab.Encode(nil, text)
	at := 0
	for i, l := range lines {
		seq := r.Vocab.Encode(nil, l)
		start := max(0, at-ctxTokens)
		full := all[start : at+len(seq)]
		lp := make([]float64, len(full))
		if err := r.Net.LogProbs(context.Background(), lp, full); err != nil {
			t.Fatal(err)
		}
		var nats float64
		for _, v := range lp[at-start:] {
			nats -= v
		}
		want := nats / math.Ln2
		for _, row := range []scoreRow{rows[i], rows[i+3]} {
			if !closeRel(row.Bits, want, 1e-6) {
				t.Errorf("line %d: got %v bits, want %v (with %d context tokens)", i+1, row.Bits, want, at-start)
			}
		}
		at += len(seq)
	}
	// Line 2 with context differs from line 2 alone (the test is not
	// vacuous), and line 1 has no context at all.
	alone, _ := evalBits(t, r.Net, r.Vocab, lines[1])
	if closeRel(rows[1].Bits, alone, 1e-9) {
		t.Errorf("line 2 scored the same with and without context: %v", alone)
	}
	code, _, stderr = runCmd(t, "", "score", "--checkpoint", r.Ckpt, "--context", "-1", path)
	if code != exitUsage {
		t.Errorf("--context -1: exit %d (%s), want %d", code, stderr, exitUsage)
	}
}
