package demo

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"
	"time"

	"weft/data"
)

// TestWriteFilesAndSplitMarks writes a small corpus and its marks, checks
// that a second write leaves the files untouched, and that the marks of the
// test split fall on the characters the generator marked there.
func TestWriteFilesAndSplitMarks(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "log.txt")
	n, err := WriteFiles(path, 3, 200_000)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	marks, err := Generate(&buf, 3, 200_000)
	if err != nil {
		t.Fatal(err)
	}
	if n != len(marks.Offsets(0)) || n == 0 {
		t.Fatalf("WriteFiles marked %d positions, Generate %d", n, len(marks.Offsets(0)))
	}
	old := time.Unix(1_000_000, 0)
	if err := os.Chtimes(path, old, old); err != nil {
		t.Fatal(err)
	}
	if _, err := WriteFiles(path, 3, 200_000); err != nil {
		t.Fatal(err)
	}
	if fi, err := os.Stat(path); err != nil || !fi.ModTime().Equal(old) {
		t.Errorf("the same corpus was written again (%v)", err)
	}
	cfg := data.DefaultConfig()
	cfg.Files, cfg.Tokenizer = []string{path}, "char"
	ds, err := data.Prepare(context.Background(), cfg, dir, "")
	if err != nil {
		t.Fatal(err)
	}
	mask, err := SplitMarks(path, ds.Test)
	if err != nil {
		t.Fatal(err)
	}
	offsets, err := ds.Test.TokenOffsets(nil)
	if err != nil {
		t.Fatal(err)
	}
	want := map[int64]bool{}
	for _, o := range marks.Offsets(0) {
		want[int64(o)] = true
	}
	got := 0
	for i, m := range mask {
		if m != want[offsets[i]] {
			t.Fatalf("token %d at offset %d: marked %v, generator %v", i, offsets[i], m, want[offsets[i]])
		}
		if m {
			got++
		}
	}
	if len(mask) != ds.Test.Tokens.Len() || got == 0 {
		t.Errorf("mask of %d tokens with %d marked, split of %d", len(mask), got, ds.Test.Tokens.Len())
	}
	if m, err := SplitMarks(filepath.Join(dir, "none.txt"), ds.Test); m != nil || err != nil {
		t.Errorf("no marks file: got %v, %v", m, err)
	}
}
