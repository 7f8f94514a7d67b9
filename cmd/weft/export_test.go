package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"weft/checkpoint"
	"weft/checkpoint/onnx"
	pb "weft/checkpoint/onnx/onnxpb"
	"weft/checkpoint/onnx/onnxtest"
	"weft/checkpoint/runs"
)

func TestExportFlags(t *testing.T) {
	for _, tt := range []struct {
		args []string
		want exportOptions
	}{
		{[]string{"export", "--run", "r", "-o", "m.onnx"}, exportOptions{Run: "r", Format: "onnx", Output: "m.onnx"}},
		{[]string{"export", "--checkpoint", "c.safetensors", "--format", "onnx", "--output", "m.onnx"},
			exportOptions{Checkpoint: "c.safetensors", Format: "onnx", Output: "m.onnx"}},
		{[]string{"export", "--run", "r", "--checkpoint", "latest", "-o", "m.onnx"}, exportOptions{Run: "r", Checkpoint: "latest", Format: "onnx", Output: "m.onnx"}},
	} {
		var got *exportOptions
		cmd := newExportCmd(&deps{}, func(o *exportOptions) error { got = o; return nil })
		cmd.SetArgs(tt.args[1:])
		if err := cmd.Execute(); err != nil {
			t.Fatalf("%v: %v", tt.args, err)
		}
		if got.Run != tt.want.Run || got.Checkpoint != tt.want.Checkpoint || got.Format != tt.want.Format || got.Output != tt.want.Output {
			t.Errorf("%v: got %+v, want %+v", tt.args, *got, tt.want)
		}
	}
	for _, tt := range []struct {
		args []string
		want string
	}{
		{[]string{"export", "--run", "r"}, "give -o FILE"},
		{[]string{"export", "--run", "r", "-o", "m.onnx", "--format", "tflite"}, `--format must be onnx, got "tflite"`},
		{[]string{"export", "-o", "m.onnx"}, "give --run DIR or --checkpoint FILE"},
		{[]string{"export", "extra", "-o", "m.onnx"}, "takes no arguments"},
	} {
		code, out, stderr := runCmd(t, "", tt.args...)
		if code != exitUsage || out != "" || !strings.HasPrefix(stderr, "weft: ") || !strings.Contains(stderr, tt.want) {
			t.Errorf("%v: got exit %d, stdout %q, stderr %q; want exit %d and %q", tt.args, code, out, stderr, exitUsage, tt.want)
		}
	}
}

// TestExport trains a small run, exports it with the command and checks
// the file: its ONNX versions and metadata, and, in ONNX Runtime, the
// README's example (checkpoint/onnx/testdata/score_line.js) against
// `weft score` on the same lines.
func TestExport(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "30"); code != exitOK {
		t.Fatalf("train: exit %d: %s", code, stderr)
	}
	best, err := runs.OpenModel(runDir, "")
	if err != nil {
		t.Fatal(err)
	}
	model := filepath.Join(dir, "model.onnx")
	code, out, stderr := weftIn(t, nil, "export", "--run", runDir, "-o", model)
	if code != exitOK || stderr != "" {
		t.Fatalf("export: exit %d: %s", code, stderr)
	}
	if want := "wrote " + model + ": lstm-1x16 from " + best.Path; !strings.HasPrefix(out, want) || strings.Count(out, "\n") != 1 {
		t.Errorf("export printed %q, want one line starting %q", out, want)
	}
	m := readONNX(t, model)
	vj, err := best.Vocab.MarshalJSON()
	if err != nil {
		t.Fatal(err)
	}
	meta := map[string]string{}
	for _, p := range m.GetMetadataProps() {
		meta[p.GetKey()] = p.GetValue()
	}
	if m.GetIrVersion() != 8 || len(m.GetOpsetImport()) != 1 || m.GetOpsetImport()[0].GetVersion() != 14 ||
		m.GetModelVersion() != best.Step || m.GetProducerName() != "weft" {
		t.Errorf("got IR version %d, opsets %v, model version %d, producer %q; want 8, [14], %d, weft",
			m.GetIrVersion(), m.GetOpsetImport(), m.GetModelVersion(), m.GetProducerName(), best.Step)
	}
	var settings struct{ Boundary string }
	if err := json.Unmarshal(vj, &settings); err != nil {
		t.Fatal(err)
	}
	if meta[onnx.MetaVocabulary] != string(vj) || meta[onnx.MetaTokenizer] != "char" || meta[onnx.MetaBoundary] != settings.Boundary ||
		meta[onnx.MetaLowercase] != "false" {
		t.Errorf("metadata %q, %q, boundary %q, lowercase %q; want the run's vocabulary, char, %q, false",
			meta[onnx.MetaVocabulary], meta[onnx.MetaTokenizer], meta[onnx.MetaBoundary], meta[onnx.MetaLowercase], settings.Boundary)
	}

	// --checkpoint FILE exports that checkpoint, whatever the best one is.
	step20 := checkpoint.StepPath(runs.Layout(runDir).Checkpoints(), 20)
	other := filepath.Join(dir, "step20.onnx")
	if code, _, stderr := weftIn(t, nil, "export", "--checkpoint", step20, "-o", other); code != exitOK {
		t.Fatalf("export --checkpoint: exit %d: %s", code, stderr)
	}
	if got := readONNX(t, other).GetModelVersion(); got != 20 {
		t.Errorf("--checkpoint %s: model version %d, want 20", step20, got)
	}

	t.Run("runtime", func(t *testing.T) {
		rt := onnxtest.Find(t)
		script := onnxtest.Script(t, "score_line.js")
		// Lines the model did not train on (invented), one with characters
		// outside its vocabulary.
		lines := []string{"the tide turns at the east pier.", "Quay 4 — ß unknown ǂ marks", ""}
		input := filepath.Join(dir, "held-out.txt")
		if err := os.WriteFile(input, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		code, out, stderr := weftIn(t, nil, "score", "--run", runDir, "--json", input)
		if code != exitOK {
			t.Fatalf("score: exit %d: %s", code, stderr)
		}
		dec := json.NewDecoder(strings.NewReader(out))
		for _, line := range lines {
			var row struct {
				Bits   float64 `json:"bits"`
				Tokens int     `json:"tokens"`
			}
			if err := dec.Decode(&row); err != nil {
				t.Fatalf("weft score --json: %v in %q", err, out)
			}
			printed := strings.TrimSpace(string(rt.Run(t, script, model, line)))
			got, err := strconv.ParseFloat(printed, 64)
			if err != nil {
				t.Fatalf("score_line.js printed %q", printed)
			}
			// 1e-5 nats per token, the tolerance of checkpoint/onnx's
			// runtime test (float32 in both), in bits, plus the last
			// printed decimal of both numbers.
			if tol := float64(row.Tokens)*1e-5/math.Ln2 + 2e-6; math.Abs(got-row.Bits) > tol {
				t.Errorf("line %q: ONNX Runtime %.6f bits, weft score %.6f (tolerance %.2g)", line, got, row.Bits, tol)
			}
		}
	})
}

func readONNX(t *testing.T, path string) *pb.ModelProto {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	m := new(pb.ModelProto)
	if err := proto.Unmarshal(b, m); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return m
}

// TestExportBadInput checks the usual one-line errors (exit status 1) for a
// damaged checkpoint, a directory without checkpoints and an output that
// cannot be written, and that nothing is left at -o.
func TestExportBadInput(t *testing.T) {
	dir := t.TempDir()
	cfg := tinyRun(t, dir)
	runDir := filepath.Join(dir, "run")
	if code, _, stderr := weftIn(t, nil, "train", cfg, "--run", runDir, "--steps", "20"); code != exitOK {
		t.Fatalf("train: exit %d: %s", code, stderr)
	}
	good := checkpoint.StepPath(runs.Layout(runDir).Checkpoints(), 20)
	raw, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	flipped := append([]byte(nil), raw...)
	flipped[len(flipped)-100] ^= 0x40
	bad := filepath.Join(dir, "bad.safetensors")
	if err := os.WriteFile(bad, flipped, 0o644); err != nil {
		t.Fatal(err)
	}
	cut := filepath.Join(dir, "cut.safetensors")
	if err := os.WriteFile(cut, raw[:len(raw)/2], 0o644); err != nil {
		t.Fatal(err)
	}
	empty := filepath.Join(dir, "empty")
	if err := os.Mkdir(empty, 0o755); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "out.onnx")
	for _, tt := range []struct {
		name string
		args []string
		want []string
	}{
		{"damaged checkpoint", []string{"--checkpoint", bad}, []string{bad, "checksum mismatch"}},
		{"truncated checkpoint", []string{"--checkpoint", cut}, []string{cut, "outside the"}},
		{"directory without checkpoints", []string{"--run", empty}, []string{empty, "no checkpoints folder"}},
		{"output folder missing", []string{"--checkpoint", good, "-o", filepath.Join(dir, "no", "such", "m.onnx")}, []string{filepath.Join(dir, "no", "such", "m.onnx")}},
	} {
		args := append([]string{"export", "-o", out}, tt.args...)
		code, stdout, stderr := weftIn(t, nil, args...)
		ok := code == exitFailure && stdout == "" && strings.HasPrefix(stderr, "weft: ") && strings.Count(stderr, "\n") == 1 && !strings.Contains(stderr, "goroutine")
		for _, w := range tt.want {
			ok = ok && strings.Contains(stderr, w)
		}
		if !ok {
			t.Errorf("%s: got exit %d, stdout %q, stderr %q; want exit 1 and one line with %q", tt.name, code, stdout, stderr, tt.want)
		}
		if _, err := os.Stat(out); !os.IsNotExist(err) {
			t.Errorf("%s: %s exists after a failed export", tt.name, out)
		}
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 6 { // corpus, run file, run, bad, cut, empty
		names := []string{}
		for _, e := range ents {
			names = append(names, e.Name())
		}
		t.Errorf("the folder holds %v after the failed exports, want no temporary files", names)
	}
}
