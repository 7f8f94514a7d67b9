package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"weft/checkpoint"
)

func TestInspect(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "30"); code != exitOK {
		t.Fatalf("train: exit %d: %s", code, stderr)
	}
	ckdir := filepath.Join(runDir, checkpointsDir)
	good := checkpoint.StepPath(ckdir, 30)
	V := 0
	if m, err := checkpoint.LoadModel(good); err != nil {
		t.Fatal(err)
	} else {
		V = m.Vocab.Len()
	}

	t.Run("file", func(t *testing.T) {
		code, out, stderr := weftIn(t, nil, "inspect", good)
		if code != exitOK {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		for _, want := range []string{"checkpoint " + good, "format version 1, checksum verified", "step 30, 0 epochs completed",
			"model: lstm, 1 layer(s) of 16 units, embedding 8", "char tokenizer", "optimizer: adam"} {
			if !strings.Contains(out, want) {
				t.Errorf("output lacks %q:\n%s", want, out)
			}
		}
		// An LSTM's recurrent weight is 4H×H = 64×16 F32: 4,096 bytes.
		if !regexp.MustCompile(`model\.layer\.0\.recurrent_weight\s+F32\s+\[64 16\]\s+4,096`).MatchString(out) {
			t.Errorf("tensor table lacks the recurrent weight row:\n%s", out)
		}
		// Adam keeps two moments per parameter.
		if !strings.Contains(out, "optim.m.layer.0.input_weight") || !strings.Contains(out, "optim.v.output.bias") {
			t.Errorf("tensor table lacks the optimizer state:\n%s", out)
		}
	})

	t.Run("json", func(t *testing.T) {
		code, out, stderr := weftIn(t, nil, "inspect", "--json", good)
		if code != exitOK {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		var got struct {
			Valid     bool  `json:"valid"`
			Step      int64 `json:"step"`
			VocabSize int   `json:"vocabulary_size"`
			Tokenizer string
			Model     map[string]any `json:"model"`
			Tensors   []struct {
				Name  string `json:"name"`
				DType string `json:"dtype"`
				Shape []int  `json:"shape"`
				Bytes int64  `json:"bytes"`
			} `json:"tensors"`
		}
		if err := json.Unmarshal([]byte(out), &got); err != nil {
			t.Fatalf("not JSON: %v\n%s", err, out)
		}
		if !got.Valid || got.Step != 30 || got.VocabSize != V || got.Tokenizer != "char" || got.Model["hidden_size"] != 16.0 {
			t.Errorf("got valid %v, step %d, vocabulary %d, tokenizer %q, hidden %v; want true, 30, %d, char, 16",
				got.Valid, got.Step, got.VocabSize, got.Tokenizer, got.Model["hidden_size"], V)
		}
		found := false
		for _, tn := range got.Tensors {
			if tn.Name == "model.embedding.weight" {
				found = true
				// V×E F32: V·8·4 bytes.
				if tn.DType != "F32" || len(tn.Shape) != 2 || tn.Shape[0] != V || tn.Shape[1] != 8 || tn.Bytes != int64(V*8*4) {
					t.Errorf("embedding row: %+v, want F32 [%d 8] %d bytes", tn, V, V*32)
				}
			}
		}
		if !found {
			t.Errorf("no embedding tensor in %s", out)
		}
	})

	t.Run("run directory", func(t *testing.T) {
		code, out, stderr := weftIn(t, nil, "inspect", runDir)
		if code != exitOK {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		if !strings.Contains(out, "newest checkpoint "+good) || !strings.Contains(out, "best checkpoint "+checkpoint.BestPath(ckdir)) {
			t.Errorf("output lacks the newest and best checkpoints:\n%s", out)
		}
	})

	t.Run("damaged", func(t *testing.T) {
		raw, err := os.ReadFile(good)
		if err != nil {
			t.Fatal(err)
		}
		bad := filepath.Join(dir, "bad.safetensors")
		flipped := append([]byte(nil), raw...)
		flipped[len(flipped)-100] ^= 0x40
		damaged := "weft: checkpoint " + bad + " is damaged: "
		for _, tt := range []struct {
			name, prefix, want string
			content            []byte
		}{
			{"flipped byte", damaged, "checksum mismatch", flipped},
			{"truncated", damaged, "outside the", raw[:len(raw)/3]},
			// Issue 12: a file that is not a checkpoint is called that,
			// not a damaged one.
			{"not a checkpoint", "weft: " + bad + " is not a checkpoint (", "not a safetensors file", []byte("this is not a checkpoint at all\n")},
		} {
			if err := os.WriteFile(bad, tt.content, 0o644); err != nil {
				t.Fatal(err)
			}
			code, out, stderr := weftIn(t, nil, "inspect", bad)
			if code != exitFailure || out != "" || strings.Count(stderr, "\n") != 1 ||
				!strings.HasPrefix(stderr, tt.prefix) || !strings.Contains(stderr, tt.want) {
				t.Errorf("%s: got exit %d, stdout %q, stderr %q; want exit 1 and one line naming the file and %q", tt.name, code, out, stderr, tt.want)
			}
		}
		if err := os.WriteFile(bad, flipped, 0o644); err != nil {
			t.Fatal(err)
		}
		code, out, _ := weftIn(t, nil, "inspect", "--json", bad)
		var got struct {
			Valid   bool   `json:"valid"`
			Problem string `json:"problem"`
		}
		if code != exitFailure || json.Unmarshal([]byte(out), &got) != nil || got.Valid || !strings.Contains(got.Problem, "checksum") {
			t.Errorf("--json on a damaged file: exit %d, output %s", code, out)
		}
		code, _, stderr := weftIn(t, nil, "inspect", filepath.Join(dir, "missing.safetensors"))
		if code != exitFailure || !strings.Contains(stderr, "missing.safetensors") {
			t.Errorf("missing file: exit %d, stderr %q", code, stderr)
		}
	})
}
