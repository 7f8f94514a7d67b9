package data_test

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"testing"

	"weft/data"
	"weft/data/demo"
)

// TestDemoCorpus prepares the demo corpus with the char tokenizer and
// checks that each mark inside the test split points, through
// TokenOffsets, at the token of the marked character.
func TestDemoCorpus(t *testing.T) {
	var buf bytes.Buffer
	marks, err := demo.Generate(&buf, 11, 300_000)
	if err != nil {
		t.Fatal(err)
	}
	text := buf.String()
	p := filepath.Join(t.TempDir(), "demo.txt")
	if err := os.WriteFile(p, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := data.DefaultConfig()
	cfg.Files = []string{p}
	ds, err := data.Prepare(context.Background(), cfg, "", "")
	if err != nil {
		t.Fatal(err)
	}
	offs, err := ds.Test.TokenOffsets(nil)
	if err != nil {
		t.Fatal(err)
	}
	checked := 0
	for _, m := range marks {
		i := sort.Search(len(offs), func(i int) bool { return offs[i] >= int64(m.Offset) })
		if i == len(offs) || offs[i] != int64(m.Offset) {
			continue // not in the test split
		}
		// The demo text is ASCII: rune offsets are byte offsets.
		if got, want := ds.Vocab.Piece(ds.Test.Tokens.At(i)), text[m.Offset:m.Offset+1]; got != want {
			t.Fatalf("mark at %d: token %q, text %q", m.Offset, got, want)
		}
		checked++
	}
	if checked < 1000 {
		t.Errorf("only %d marks fell in the test split", checked)
	}
}

func TestReportJSON(t *testing.T) {
	b, err := json.Marshal(data.Report{})
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]json.RawMessage
	json.Unmarshal(b, &m)
	keys := []string{}
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	// The keys the foundation issue fixes for `weft prepare --json`.
	if want := []string{"leaked_test_lines", "test", "train", "validation", "vocabulary_size"}; !reflect.DeepEqual(keys, want) {
		t.Errorf("report keys %v, want %v", keys, want)
	}
	var split map[string]any
	json.Unmarshal(m["train"], &split)
	keys = keys[:0]
	for k := range split {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	if want := []string{"characters", "lines", "oov_rate", "tokens"}; !reflect.DeepEqual(keys, want) {
		t.Errorf("split keys %v, want %v", keys, want)
	}
}

func TestDocumentSplit(t *testing.T) {
	dir := t.TempDir()
	var files []string
	for i := 0; i < 60; i++ {
		p := filepath.Join(dir, "doc"+string(rune('A'+i/26))+string(rune('a'+i%26))+".txt")
		os.WriteFile(p, []byte("document "+filepath.Base(p)+"\n"), 0o644)
		files = append(files, p)
	}
	cfg := data.DefaultConfig()
	cfg.Files = []string{dir}
	cfg.Split = "document"
	cfg.ValidationFraction, cfg.TestFraction = 0.2, 0.2
	total := 0
	for _, f := range files {
		fi, _ := os.Stat(f)
		total += int(fi.Size()) // ASCII: bytes are characters
	}
	run := func() ([3]string, int64, int64) {
		ds, err := data.Prepare(context.Background(), cfg, "", "")
		if err != nil {
			t.Fatal(err)
		}
		var out [3]string
		var lines, chars int64
		for i, s := range ds.Splits() {
			out[i] = ds.Vocab.Decode(s.Tokens.Ints())
			lines += s.Lines
			chars += s.Characters
		}
		return out, lines, chars
	}
	a, lines, chars := run()
	b, _, _ := run()
	if a != b {
		t.Fatal("document split not deterministic")
	}
	// Each one-line document lies in exactly one split.
	if lines != 60 || chars != int64(total) {
		t.Errorf("splits hold %d lines and %d characters, want 60 and %d", lines, chars, total)
	}
	if a[1] == "" || a[2] == "" {
		t.Errorf("a held-out split is empty")
	}
}
