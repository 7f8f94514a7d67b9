package runs

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"weft/checkpoint"
	"weft/data"
)

// fixture is a run directory written by weft at commit 721ea05, before the
// files of a run directory had versions (see its README).
const fixture = "testdata/run-721ea05"

// TestFrozenRunDirectory keeps loading the run directory of the older
// format: its split report, metrics log, baselines manifest and models.
func TestFrozenRunDirectory(t *testing.T) {
	rep, err := ReadSplitReport(fixture)
	if err != nil {
		t.Fatal(err)
	}
	// The numbers the fixture's split.json holds, read by eye.
	if rep.Train.Characters != 10815 || rep.Validation.Tokens != 601 || rep.VocabularySize != 21 {
		t.Errorf("split report: %+v", rep)
	}
	lines, err := ReadMetrics(Layout(fixture).Metrics())
	if err != nil {
		t.Fatal(err)
	}
	if len(lines) != 4 || lines[3].Step != 20 || lines[3].Version != 0 || lines[3].ValBPC == nil || math.Abs(float64(*lines[3].ValBPC)-4.283938631043159) > 0 {
		t.Errorf("metrics: %d lines, last %+v", len(lines), lines[len(lines)-1])
	}
	m, err := ReadManifest(Layout(fixture).Baselines())
	if err != nil {
		t.Fatal(err)
	}
	if m.VocabSize != 21 || m.Version != 1 {
		t.Errorf("manifest: %+v", m)
	}
	for which, step := range map[string]int64{"best": 20, "latest": 20, "10": 10} {
		mod, err := OpenModel(fixture, which)
		if err != nil {
			t.Fatalf("%s: %v", which, err)
		}
		if mod.Step != step || mod.Vocab.Len() != 21 {
			t.Errorf("%s: step %d, vocabulary %d; want %d, 21", which, mod.Step, mod.Vocab.Len(), step)
		}
	}
	if _, err := data.ReadVocabFile(Layout(fixture).Vocab()); err != nil {
		t.Error(err)
	}
}

func TestVersionChecks(t *testing.T) {
	dir := t.TempDir()
	write := func(name, content string) string {
		p := filepath.Join(dir, name)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	write(MetricsFile, `{"version":1,"step":5,"learning_rate":null}`+"\n"+`{"version":2,"step":10}`+"\n")
	if _, err := ReadMetrics(Layout(dir).Metrics()); err == nil || !strings.Contains(err.Error(), "format version 2") {
		t.Errorf("metrics of version 2: got %v", err)
	}
	write(SplitFile, `{"format":"weft-split","version":9}`)
	if _, err := ReadSplitReport(dir); err == nil || !strings.Contains(err.Error(), "format version 9") {
		t.Errorf("split report of version 9: got %v", err)
	}
	write(SplitFile, `{"format":"weft-marks","version":1}`)
	if _, err := ReadSplitReport(dir); err == nil || !strings.Contains(err.Error(), `not a "weft-split" file (format "weft-marks")`) {
		t.Errorf("split report of another format: got %v", err)
	}
	write(filepath.Join(BaselinesDir, ManifestFile), `{"format":"weft-baselines","version":3}`)
	if _, err := ReadManifest(Layout(dir).Baselines()); err == nil || !strings.Contains(err.Error(), "format version 3") {
		t.Errorf("manifest of version 3: got %v", err)
	}
}

// TestNumberJSON: non-finite numbers are written as null and read as NaN.
func TestNumberJSON(t *testing.T) {
	for _, v := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		b, err := Number(v).MarshalJSON()
		if err != nil || string(b) != "null" {
			t.Errorf("%v: got %s, %v; want null", v, b, err)
		}
	}
	var n Number
	if err := n.UnmarshalJSON([]byte("null")); err != nil || !math.IsNaN(float64(n)) {
		t.Errorf("null: got %v, %v; want NaN", n, err)
	}
	if err := n.UnmarshalJSON([]byte("1.5")); err != nil || n != 1.5 {
		t.Errorf("1.5: got %v, %v", n, err)
	}
}

// TestWrittenFilesCarryVersions: a new run's files carry the current
// versions and read back.
func TestWrittenFilesCarryVersions(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	r.Evaluation.NgramOrders, r.Evaluation.NgramSmoothers = []int{1, 2}, []string{"kneser_ney"}
	r.Evaluation.MarkovOrders, r.Evaluation.HMMStates = nil, nil
	run := filepath.Join(dir, "run")
	if _, _, err := train(t, context.Background(), r, run, 10, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(Layout(run).SplitFile())
	if err != nil || !strings.Contains(string(b), `"format": "weft-split"`) || !strings.Contains(string(b), `"version": 1`) {
		t.Errorf("split.json: %s %v", b, err)
	}
	lines, err := ReadMetrics(Layout(run).Metrics())
	if err != nil || len(lines) == 0 || lines[0].Version != metricsVersion {
		t.Errorf("metrics: %+v %v", lines, err)
	}
	d, err := Open(run)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	ds, err := Prepare(context.Background(), r, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	var notes []string
	l, err := FitBaselines(context.Background(), r.Evaluation.Config, ds, d.Baselines(), nil, func(s string) { notes = append(notes, s) })
	if err != nil || len(l.Models()) != 2 {
		t.Fatalf("fit: %v, %d models", err, len(l.Models()))
	}
	if m, err := ReadManifest(d.Baselines()); err != nil || m.Version != manifestHeader.Version {
		t.Errorf("manifest: %+v %v", m, err)
	}
	// A damaged cache is refitted, with a note.
	if err := os.WriteFile(filepath.Join(d.Baselines(), "ngram-counts.bin"), []byte("junk"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := FitBaselines(context.Background(), r.Evaluation.Config, ds, d.Baselines(), nil, func(s string) { notes = append(notes, s) }); err != nil {
		t.Fatal(err)
	}
	if len(notes) != 1 || !strings.Contains(notes[0], "fitting them again") {
		t.Errorf("notes %q, want one saying the cache was refitted", notes)
	}
	if _, err := checkpoint.List(d.Checkpoints()); err != nil {
		t.Error(err)
	}
}

// TestInspect describes the fixture run directory's newest and best
// checkpoints, and reports a damaged copy as invalid rather than failing.
func TestInspect(t *testing.T) {
	all, err := Inspect(fixture)
	if err != nil {
		t.Fatal(err)
	}
	if len(all) != 2 || all[0].Role != "newest" || all[1].Role != "best" || *all[0].Step != 20 || all[0].VocabSize != 21 || all[0].Optimizer != "adam" || !all[0].Valid {
		t.Fatalf("got %+v", all)
	}
	b, err := os.ReadFile(filepath.Join(Layout(fixture).Checkpoints(), checkpoint.BestName))
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)-3] ^= 1
	p := filepath.Join(t.TempDir(), "x.safetensors")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	in, err := InspectFile(p)
	if err != nil || in.Valid || in.Problem == "" {
		t.Errorf("damaged: got %+v, %v; want Valid false with the problem", in, err)
	}
	if _, err := Inspect(t.TempDir()); err == nil || !strings.Contains(err.Error(), "no checkpoints") {
		t.Errorf("empty directory: got %v", err)
	}
}
