package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestREADMEKeyTable fails when the README's key table differs from what the
// config structs say; `make docs` regenerates it.
func TestREADMEKeyTable(t *testing.T) {
	root, err := moduleRoot()
	if err != nil {
		t.Fatal(err)
	}
	table, err := Table(root)
	if err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"`data.files`", "`model.hidden_size`", "`checkpoint.keep_last`"} {
		if !strings.Contains(table, k) {
			t.Errorf("table lacks %s", k)
		}
	}
	path := filepath.Join(root, "README.md")
	cur, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	want, err := splice(cur, table)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(cur, want) {
		t.Errorf("README.md key table is stale: run make docs")
	}
}
