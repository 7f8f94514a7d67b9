package configs

import (
	"errors"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestPresetsLoad(t *testing.T) {
	ps := Presets()
	if len(ps) < 4 {
		t.Fatalf("got %d presets, want at least 4 (small char, large char, word, events)", len(ps))
	}
	for _, p := range ps {
		t.Run(p.Name, func(t *testing.T) {
			r, err := Parse(filepath.Join("/runs", p.Name+".toml"), p.Text, nil)
			if err != nil {
				t.Fatalf("preset does not load: %v", err)
			}
			if p.Summary == "" {
				t.Errorf("preset has no summary line")
			}
			for _, f := range r.Data.Files {
				if !filepath.IsAbs(f) {
					t.Errorf("data.files entry %q not resolved against the file's folder", f)
				}
			}
		})
	}
	if _, err := LookupPreset(DefaultPreset); err != nil {
		t.Fatal(err)
	}
}

func TestStrictErrors(t *testing.T) {
	tests := []struct {
		name     string
		src      string
		wantLine int
		wantKey  string
		wantMsg  string // substring
	}{
		{
			name:     "unknown key with suggestion",
			src:      "[model]\ncell = \"lstm\"\nhiden_size = 12\n",
			wantLine: 3, wantKey: "model.hiden_size",
			wantMsg: "unknown key model.hiden_size; did you mean model.hidden_size?",
		},
		{
			name:     "key in the wrong section",
			src:      "[data]\nlearning_rate = 0.1\n",
			wantLine: 2, wantKey: "data.learning_rate",
			wantMsg: "did you mean training.learning_rate?",
		},
		{
			name:     "unknown section",
			src:      "[trainig]\nseed = 3\n",
			wantLine: 1,
			wantMsg:  "unknown key trainig",
		},
		{
			name:     "wrong type",
			src:      "[model]\n\nlayers = \"two\"\n",
			wantLine: 3, wantKey: "model.layers",
			wantMsg: "want an integer, got a string",
		},
		{
			name:     "out of range",
			src:      "# comment\n[checkpoint]\nkeep_last = 0\n[data]\nfiles = [\"x\"]\n",
			wantLine: 3, wantKey: "checkpoint.keep_last",
			wantMsg: "keep_last must be at least 1",
		},
		{
			name:     "bad duration",
			src:      "[training]\nmax_duration = \"eight hours\"\n[data]\nfiles = [\"x\"]\n",
			wantLine: 2, wantKey: "training.max_duration",
			wantMsg: "not a positive duration",
		},
		{
			name:    "syntax error",
			src:     "[model\ncell = 1\n",
			wantMsg: "run.toml",
		},
		{
			name:    "binary file",
			src:     "\x00\x01\x02",
			wantMsg: "not a text file",
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse("run.toml", []byte(tt.src), nil)
			if err == nil {
				t.Fatal("got no error")
			}
			var ce *Error
			if !errors.As(err, &ce) {
				t.Fatalf("got %T %v, want *configs.Error", err, err)
			}
			if tt.wantLine != 0 && ce.Line != tt.wantLine {
				t.Errorf("got line %d, want %d (%v)", ce.Line, tt.wantLine, err)
			}
			if tt.wantKey != "" && ce.Key != tt.wantKey {
				t.Errorf("got key %q, want %q (%v)", ce.Key, tt.wantKey, err)
			}
			if !strings.Contains(err.Error(), tt.wantMsg) {
				t.Errorf("got %q, want it to contain %q", err, tt.wantMsg)
			}
			if !strings.HasPrefix(err.Error(), "run.toml") {
				t.Errorf("got %q, want it to start with the file name", err)
			}
			if strings.Contains(err.Error(), "\n") {
				t.Errorf("got a multi-line message %q", err)
			}
		})
	}
}

func TestOverrides(t *testing.T) {
	src := []byte("[data]\nfiles = [\"a.txt\"]\n[training]\nlearning_rate = 0.1\n")
	r, err := Parse("/x/run.toml", src, []string{
		"training.learning_rate=0.5",
		"model.cell=gru", // a bare word is taken as a string
		"training.seed=7",
		"data.files=b.txt,c.txt", // a bare list
	})
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Training.LearningRate; got != 0.5 {
		t.Errorf("learning_rate: got %v, want 0.5", got)
	}
	if r.Model.Cell != "gru" || r.Training.Seed != 7 {
		t.Errorf("got cell %q seed %d, want gru 7", r.Model.Cell, r.Training.Seed)
	}
	if want := []string{"/x/b.txt", "/x/c.txt"}; !reflect.DeepEqual(r.Data.Files, want) {
		t.Errorf("files: got %v, want %v", r.Data.Files, want)
	}

	bad := []struct{ set, want string }{
		{"model.hiden_size=3", "did you mean model.hidden_size?"},
		{"model.layers=two", "model.layers=two"},
		{"checkpoint.keep_last=0", "--set checkpoint.keep_last=0: must be at least 1"},
		// Issue 12: a bad value names the override, not the file's line
		// that sets the same key to a good one.
		{"training.learning_rate=0", "--set training.learning_rate=0: must be a positive number, got 0"},
		// Issue 12: a value that is not TOML gets the type it wants, not
		// the parser's words.
		{"model.hidden_size=abc", "--set model.hidden_size=abc: want an integer, got a string"},
		{"noequals", "is not key=value"},
		{"seed=3", "must be section.key"},
	}
	for _, b := range bad {
		_, err := Parse("/x/run.toml", src, []string{b.set})
		var ce *Error
		if err == nil || !strings.Contains(err.Error(), b.want) || !errors.As(err, &ce) || ce.File != "--set" || strings.Contains(err.Error(), "run.toml") {
			t.Errorf("--set %s: got %v, want an error of --set containing %q", b.set, err, b.want)
		}
	}
}

// TestMisspelledSection: issue 12, a misspelled section gets a suggestion.
func TestMisspelledSection(t *testing.T) {
	for src, want := range map[string]string{
		"[traning]\nseed = 3\n":     "unknown key traning; did you mean training?",
		"[evaluaton]\nseed = 3\n":   "unknown key evaluaton; did you mean evaluation?",
		"[modle]\nhiden_size = 3\n": "unknown key modle; did you mean model?",
	} {
		_, err := Parse("/x/run.toml", []byte("[data]\nfiles = [\"a.txt\"]\n"+src), nil)
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: got %v, want %q", src, err, want)
		}
	}
}

func TestEncodeRoundTrip(t *testing.T) {
	for _, p := range Presets() {
		r, err := Parse("/runs/"+p.Name+".toml", p.Text, nil)
		if err != nil {
			t.Fatal(err)
		}
		b, err := Encode(r)
		if err != nil {
			t.Fatal(err)
		}
		r2, err := Parse("/runs/resolved.toml", b, nil)
		if err != nil {
			t.Fatalf("%s: resolved file does not load: %v\n%s", p.Name, err, b)
		}
		b2, err := Encode(r2)
		if err != nil {
			t.Fatal(err)
		}
		// Compared as encoded text: nil and empty lists are the same run.
		if string(b) != string(b2) {
			t.Errorf("%s: round trip changed the run:\n got %s\nwant %s", p.Name, b2, b)
		}
	}
}

func TestKeysIncludeFixedNames(t *testing.T) {
	// The issue fixes these names: scripts, sweeps and docs depend on them.
	fixed := []string{
		"data.files", "data.tokenizer", "data.validation_fraction", "data.test_fraction",
		"model.cell", "model.layers", "model.hidden_size", "model.embedding_size", "model.dropout",
		"training.optimizer", "training.learning_rate", "training.batch_size", "training.unroll_steps",
		"training.clip_norm", "training.seed", "training.max_steps", "training.threads",
		"evaluation.every_steps", "checkpoint.every_steps", "checkpoint.keep_last",
	}
	have := map[string]bool{}
	for _, k := range Keys() {
		if have[k] {
			t.Errorf("key %s defined twice", k)
		}
		have[k] = true
	}
	for _, k := range fixed {
		if !have[k] {
			t.Errorf("fixed key %s missing", k)
		}
	}
}

func TestEditDistance(t *testing.T) {
	for _, c := range []struct {
		a, b string
		want int
	}{{"", "", 0}, {"abc", "", 3}, {"kitten", "sitting", 3}, {"hiden_size", "hidden_size", 1}} {
		if got := editDistance(c.a, c.b); got != c.want {
			t.Errorf("editDistance(%q, %q): got %d, want %d", c.a, c.b, got, c.want)
		}
	}
}
