package runs

import (
	"encoding/json"
	"fmt"
	"os"
	"strings"

	"weft/checkpoint"
	"weft/configs"
)

// Inspection describes one checkpoint: its verified summary and, when it
// holds a model, the model, vocabulary, training step and progress. Its
// JSON form is what 'weft inspect --json' prints.
type Inspection struct {
	Role string `json:"role,omitempty"` // "newest" or "best" in a run directory
	checkpoint.Summary
	Step       *int64               `json:"step,omitempty"`
	Progress   *checkpoint.Progress `json:"progress,omitempty"`
	Model      map[string]any       `json:"model,omitempty"`
	VocabSize  int                  `json:"vocabulary_size,omitempty"`
	Tokenizer  string               `json:"tokenizer,omitempty"`
	Optimizer  string               `json:"optimizer,omitempty"`
	Parameters int64                `json:"parameters,omitempty"`
	Detail     string               `json:"detail,omitempty"` // why the model part is unreadable
}

// Inspect verifies and describes the checkpoint file at path, or, for a
// directory (a run directory or a checkpoints folder), its newest periodic
// checkpoint and its best copy. A damaged file is an Inspection with Valid
// false, not an error; a directory without checkpoints is an error.
func Inspect(path string) ([]Inspection, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("inspect %s: %w", path, unwrapPath(err))
	}
	if !fi.IsDir() {
		in, err := InspectFile(path)
		if err != nil {
			return nil, err
		}
		return []Inspection{in}, nil
	}
	dir := path
	if sub := Layout(path).Checkpoints(); isDir(sub) {
		dir = sub
	}
	ents, err := checkpoint.List(dir)
	if err != nil {
		return nil, err
	}
	var out []Inspection
	add := func(role, p string) error {
		in, err := InspectFile(p)
		in.Role = role
		out = append(out, in)
		return err
	}
	if len(ents) > 0 {
		if err := add("newest", ents[0].Path); err != nil {
			return nil, err
		}
	}
	if p := checkpoint.BestPath(dir); fileExists(p) {
		if err := add("best", p); err != nil {
			return nil, err
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("inspect %s: no checkpoints", path)
	}
	return out, nil
}

func isDir(p string) bool {
	fi, err := os.Stat(p)
	return err == nil && fi.IsDir()
}

// InspectFile verifies and describes one checkpoint file. A damaged file
// is a description with Valid false, not an error.
func InspectFile(path string) (Inspection, error) {
	s, err := checkpoint.Inspect(path)
	if err != nil {
		return Inspection{}, fmt.Errorf("inspect %s: %w", path, unwrapPath(err))
	}
	in := Inspection{Summary: s}
	if !s.Valid {
		// The message names the file already.
		in.Problem = strings.TrimPrefix(oneLine(in.Problem), fmt.Sprintf("load checkpoint %q: ", path))
		return in, nil
	}
	f, err := checkpoint.Load(path)
	if err != nil { // changed since Inspect read it
		in.Valid, in.Problem = false, oneLine(err.Error())
		return in, nil
	}
	if _, ok := f.Meta[checkpoint.MetaModelConfig]; !ok {
		in.Detail = "not a model checkpoint (no model config)"
		return in, nil
	}
	m, err := checkpoint.ModelFromFile(f, path)
	if err != nil {
		in.Detail = oneLine(err.Error())
		return in, nil
	}
	var cfg map[string]any
	if json.Unmarshal([]byte(f.Meta[checkpoint.MetaModelConfig]), &cfg) == nil {
		in.Model = cfg
	}
	in.VocabSize = m.Vocab.Len()
	in.Tokenizer = m.Vocab.Kind().String()
	in.Parameters = int64(m.Net.NumParams())
	if _, ok := f.Meta[checkpoint.MetaTrainer]; ok {
		step := m.Step
		in.Step = &step
	}
	if p, err := checkpoint.ReadProgress(f); err == nil {
		in.Progress = &p
	}
	if rc := f.Meta[checkpoint.MetaRunConfig]; rc != "" {
		if r, err := configs.Parse(path, []byte(rc), nil); err == nil {
			in.Optimizer = r.Training.Optimizer
		}
	}
	return in, nil
}
