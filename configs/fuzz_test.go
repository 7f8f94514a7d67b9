package configs

import (
	"errors"
	"strings"
	"testing"
)

// FuzzParse feeds arbitrary run files to the strict decoder: it must never
// panic, every failure must be a one-line *Error naming the file, and every
// file it accepts must encode to a file that parses to the same run. The
// seed corpus is the presets plus the files under testdata/fuzz/FuzzParse.
func FuzzParse(f *testing.F) {
	for _, p := range Presets() {
		f.Add(p.Text)
	}
	f.Fuzz(func(t *testing.T, src []byte) {
		r, err := Parse("/fuzz/run.toml", src, nil)
		if err != nil {
			var ce *Error
			if !errors.As(err, &ce) {
				t.Fatalf("got %T %v, want *configs.Error", err, err)
			}
			if msg := err.Error(); !strings.HasPrefix(msg, "/fuzz/run.toml") || strings.Contains(msg, "\n") {
				t.Fatalf("message %q: want one line starting with the file name", msg)
			}
			return
		}
		b, err := Encode(r)
		if err != nil {
			t.Fatalf("accepted run does not encode: %v", err)
		}
		r2, err := Parse("/fuzz/run.toml", b, nil)
		if err != nil {
			t.Fatalf("encoded run does not parse: %v\n%s", err, b)
		}
		b2, err := Encode(r2)
		if err != nil || string(b2) != string(b) {
			t.Fatalf("round trip changed the run:\n%s\nvs\n%s", b, b2)
		}
	})
}
