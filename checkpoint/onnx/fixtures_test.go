package onnx

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	pb "weft/checkpoint/onnx/onnxpb"
	"weft/data"
	"weft/rnn"
)

var update = flag.Bool("update", false, "rewrite the fixture models in testdata/models (then run testdata/references.sh)")

// fixtureCases are exportCases shrunk to a few units, so that the models
// committed under testdata/models stay small.
func fixtureCases() []exportCase {
	var out []exportCase
	for _, c := range exportCases() {
		cfg := c.cfg
		cfg.HiddenSize = 4
		if cfg.EmbeddingSize > 0 {
			cfg.EmbeddingSize = 4
		}
		if cfg.ProjectionSize > 0 {
			cfg.ProjectionSize = 3
			if cfg.TieEmbeddings {
				cfg.ProjectionSize = 4
			}
		}
		if cfg.OutputClasses > 0 {
			cfg.OutputClasses = 3
		}
		out = append(out, exportCase{c.name, cfg})
	}
	return out
}

// fixtureVocab is a char vocabulary of an invented line.
func fixtureVocab(t testing.TB) *data.Vocab {
	t.Helper()
	v, err := data.LearnVocab(context.Background(), strings.NewReader("tug wren to berth 4, lots: slate.\n"), "fixture",
		data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		t.Fatal(err)
	}
	return v
}

func fixtureModel(t testing.TB, i int, cfg rnn.Config, v *data.Vocab) []byte {
	t.Helper()
	b, err := Encode(randomModel(t, cfg, v, uint64(i+1)), v, Options{ProducerVersion: "fixture", Step: 42})
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// controlName is the negative control of the checker: the first fixture
// with its embedding Gather's integer "axis" attribute turned into a float,
// which the Gather schema forbids. Its verdict must be a failure, or the
// checker's "passed" would mean nothing.
const controlName = "control-bad-attribute.onnx"

func controlModel(t testing.TB, v *data.Vocab) []byte {
	t.Helper()
	c := fixtureCases()[0]
	m, err := Build(randomModel(t, c.cfg, v, 1), v, Options{ProducerVersion: "fixture", Step: 42})
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range m.Graph.Node {
		if n.GetOpType() == "Gather" {
			a := n.Attribute[0]
			a.Type, a.I, a.F = pb.AttributeProto_FLOAT.Enum(), nil, proto.Float32(0)
			break
		}
	}
	b, err := proto.MarshalOptions{Deterministic: true}.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestFixturesUpToDate checks that the exporter still writes, byte for
// byte, the models under testdata/models, which onnx.checker accepted
// (TestCheckerVerdict): so its verdict applies to what Encode writes now.
// Run `go test -run TestFixturesUpToDate -update` and then
// testdata/references.sh after a deliberate change of the graph.
func TestFixturesUpToDate(t *testing.T) {
	v := fixtureVocab(t)
	models := map[string][]byte{controlName: controlModel(t, v)}
	for i, c := range fixtureCases() {
		models[c.name+".onnx"] = fixtureModel(t, i, c.cfg, v)
	}
	for name, got := range models {
		path := filepath.Join("testdata", "models", name)
		if *update {
			if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, got, 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		want, err := os.ReadFile(path)
		if err != nil {
			t.Fatalf("%v (run go test -run TestFixturesUpToDate -update, then testdata/references.sh)", err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("%s: the exporter now writes %d bytes that differ from the %d committed; if the change is meant, run go test -run TestFixturesUpToDate -update and testdata/references.sh (the ONNX checker) and commit both",
				path, len(got), len(want))
		}
	}
}

// checkerReport is testdata/checker.json, written by testdata/checker.py
// with Debian's python3-onnx.
type checkerReport struct {
	ONNXVersion string `json:"onnx_version"`
	Models      []struct {
		File      string              `json:"file"`
		SHA256    string              `json:"sha256"`
		IRVersion int                 `json:"ir_version"`
		Opset     int                 `json:"opset"`
		Checker   string              `json:"checker"`
		Outputs   map[string][]string `json:"inferred_outputs"`
	} `json:"models"`
}

// TestCheckerVerdict reads the verdict of onnx.checker.check_model with
// full_check (which adds ONNX's strict shape inference) on each committed
// fixture model, as testdata/checker.py recorded it with Debian's
// python3-onnx, and checks that every fixture passed, that the verdict is
// about the committed bytes (their SHA-256), and that the output shapes
// ONNX's own shape inference derives from the graph are the ones the
// exporter declares.
func TestCheckerVerdict(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("testdata", "checker.json"))
	if err != nil {
		t.Fatal(err)
	}
	var rep checkerReport
	if err := json.Unmarshal(raw, &rep); err != nil {
		t.Fatal(err)
	}
	byFile := map[string]int{}
	for i, m := range rep.Models {
		byFile[m.File] = i
	}
	v := fixtureVocab(t)
	V := v.Len()
	for _, c := range fixtureCases() {
		name := c.name + ".onnx"
		i, ok := byFile[name]
		if !ok {
			t.Errorf("%s: no checker verdict in testdata/checker.json (run testdata/references.sh)", name)
			continue
		}
		m := rep.Models[i]
		b, err := os.ReadFile(filepath.Join("testdata", "models", name))
		if err != nil {
			t.Fatal(err)
		}
		sum := sha256.Sum256(b)
		if got := hex.EncodeToString(sum[:]); got != m.SHA256 {
			t.Errorf("%s: SHA-256 %s, but the checker saw %s (run testdata/references.sh)", name, got, m.SHA256)
		}
		if m.Checker != "passed" || m.IRVersion != IRVersion || m.Opset != OpsetVersion {
			t.Errorf("%s: checker %q, IR version %d, opset %d; want passed, %d, %d", name, m.Checker, m.IRVersion, m.Opset, IRVersion, OpsetVersion)
		}
		// The shapes the exporter declares; inference may leave a
		// symbolic dimension unnamed ("?"), never a fixed one.
		L, H := fmt.Sprint(c.cfg.Layers), fmt.Sprint(c.cfg.HiddenSize)
		want := map[string][]string{
			OutputLogProbs:      {"batch", "sequence", fmt.Sprint(V)},
			OutputEntryLogProbs: {"batch", fmt.Sprint(V)},
			OutputStateH:        {L, "batch", H},
		}
		if c.cfg.Cell == "lstm" {
			want[OutputStateC] = []string{L, "batch", H}
		}
		if len(m.Outputs) != len(want) {
			t.Errorf("%s: shape inference gives %d outputs %v, want %d", name, len(m.Outputs), m.Outputs, len(want))
		}
		for out, dims := range want {
			got := m.Outputs[out]
			ok := len(got) == len(dims)
			for k := 0; ok && k < len(dims); k++ {
				_, err := strconv.Atoi(dims[k])
				ok = got[k] == dims[k] || got[k] == "?" && err != nil
			}
			if !ok {
				t.Errorf("%s: shape inference gives %s the shape %v, want %v", name, out, got, dims)
			}
		}
	}
	if i, ok := byFile[controlName]; !ok || !strings.HasPrefix(rep.Models[i].Checker, "failed") {
		t.Errorf("the negative control %s is missing from checker.json or passed the checker", controlName)
	}
	if len(rep.Models) != len(fixtureCases())+1 {
		t.Errorf("checker.json has %d models, want %d and the control", len(rep.Models), len(fixtureCases()))
	}
}
