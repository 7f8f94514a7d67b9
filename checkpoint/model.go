package checkpoint

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strconv"
	"strings"

	"weft/data"
	"weft/rnn"
)

// Metadata keys of a model checkpoint: what the trainer stores besides the
// tensors. They lie outside ReservedPrefix, which belongs to the envelope.
//
//	key             value
//	model_config    JSON object of rnn.Config, keyed by the run file's names (cell, hidden_size, ...)
//	run_config      the resolved run file the run trained with, TOML text
//	vocabulary      JSON of data.Vocab (data's vocabulary file format)
//	trainer_state   JSON of rnn.TrainerState (training checkpoints only)
//	progress        JSON of Progress (training checkpoints only)
const (
	MetaModelConfig = "model_config"
	MetaRunConfig   = "run_config"
	MetaVocab       = "vocabulary"
	MetaTrainer     = "trainer_state"
	MetaProgress    = "progress"
)

// Model is a trained model loaded from a checkpoint, ready to score or
// sample.
type Model struct {
	Net       *rnn.Model[float32]
	Vocab     *data.Vocab
	Config    rnn.Config
	RunConfig []byte // the resolved run file (TOML); empty when not recorded
	Step      int64  // training steps behind the weights; 0 when not recorded
	Path      string // the file it was loaded from
}

// Progress is the run-level part of a training checkpoint: where the run
// stands beyond what the trainer itself knows. Together with the model
// tensors, the trainer's tensors and rnn.TrainerState it is everything an
// exact resume needs.
type Progress struct {
	// Epoch is the number of completed passes over the training split.
	Epoch int `json:"epoch"`
	// Cursor is the position of the next training window.
	Cursor data.Cursor `json:"cursor"`
	// HaveBest says a validation ran; BestValidation is then the lowest
	// validation cross-entropy seen, in nats per token, at step BestStep,
	// and BestBitsPerChar its bits per character.
	HaveBest        bool    `json:"have_best"`
	BestValidation  float64 `json:"best_validation_nats"`
	BestBitsPerChar float64 `json:"best_validation_bits_per_char"`
	BestStep        int64   `json:"best_step"`
	// BadValidations counts the validations in a row without improvement
	// (the early-stopping patience counter).
	BadValidations int `json:"bad_validations"`
	// Divergences counts the recoveries from a divergence in a row, and
	// DivergencesTotal all of them.
	Divergences      int `json:"divergences"`
	DivergencesTotal int `json:"divergences_total"`
	// LearningRateScale multiplies the configured learning rate (and the
	// cosine floor): each recovery from a divergence multiplies it by
	// training.divergence_lr_factor. 1 when never lowered.
	LearningRateScale float64 `json:"learning_rate_scale"`
	// LossAverage is the recent moving average of the training loss, in
	// nats per token, that the divergence guard compares against, over
	// LossCount windows so far.
	LossAverage float64 `json:"loss_average"`
	LossCount   int64   `json:"loss_count"`
	// LastBitsPerChar is the most recent validation's bits per character
	// (valid when HaveBest).
	LastBitsPerChar float64 `json:"last_validation_bits_per_char"`
	// LastValidationStep is the step of the last validation, -1 before
	// the first; ValidationDue says a validation was interrupted and must
	// run before training goes on.
	LastValidationStep int64 `json:"last_validation_step"`
	ValidationDue      bool  `json:"validation_due,omitempty"`
	// DivergedAt is the step after which the divergence counter resets:
	// one past the step of the last divergence.
	DivergedAt int64 `json:"diverged_at_step,omitempty"`
	// Finished says the run ended by a budget or early stopping, with the
	// reason; a finished run is not resumed unless a budget grows.
	Finished     bool   `json:"finished,omitempty"`
	FinishReason string `json:"finish_reason,omitempty"`
	// PlannedSteps is the step at which a run that anneals to its deadline
	// ends, its "cosine" or "linear" schedule at the floor: the plan made
	// from the speed measured at the run's start (the run directory's
	// plan.json keeps the measurement). 0 when the run has no such plan;
	// checkpoints written before the field existed have none.
	PlannedSteps int64 `json:"planned_steps,omitempty"`
	// WallSeconds is the training time of all invocations so far. It is
	// the one field that differs between an interrupted and a straight run.
	WallSeconds float64 `json:"wall_seconds"`
}

// NewModelFile returns a checkpoint holding m's parameters, named
// ModelPrefix + the rnn parameter name ("model.layer.0.input_weight"), with
// the model config, the vocabulary and the run file as metadata. cfg is
// usually m.Config(); runConfig may be nil.
func NewModelFile(m *rnn.Model[float32], cfg rnn.Config, v *data.Vocab, runConfig []byte) (*File, error) {
	if v == nil {
		return nil, errors.New("model checkpoint: no vocabulary")
	}
	if v.Len() != m.VocabSize() {
		return nil, fmt.Errorf("model checkpoint: vocabulary of %d entries for a model of %d", v.Len(), m.VocabSize())
	}
	cj, err := marshalModelConfig(cfg)
	if err != nil {
		return nil, err
	}
	vj, err := v.MarshalJSON()
	if err != nil {
		return nil, fmt.Errorf("model checkpoint: vocabulary: %w", err)
	}
	f := &File{Meta: map[string]string{MetaModelConfig: string(cj), MetaVocab: string(vj)}}
	if len(runConfig) > 0 {
		f.Meta[MetaRunConfig] = string(runConfig)
	}
	for _, p := range m.Params() {
		f.Tensors = append(f.Tensors, NewFloat32(ModelPrefix+p.Name, p.Shape, p.Value))
	}
	return f, nil
}

// AddTrainer adds a trainer's state to a file from NewModelFile for the
// same model: its tensors under the names rnn gives them ("optim.*",
// "state.*"), its scalar state as MetaTrainer and the run's progress as
// MetaProgress.
func AddTrainer(f *File, tr *rnn.Trainer[float32], p Progress) error {
	for _, t := range tr.StateTensors() {
		if !strings.HasPrefix(t.Name, OptimPrefix) && !strings.HasPrefix(t.Name, StatePrefix) {
			return fmt.Errorf("training checkpoint: trainer tensor %q is outside the %q and %q families", t.Name, OptimPrefix, StatePrefix)
		}
		f.Tensors = append(f.Tensors, NewFloat32(t.Name, t.Shape, t.Value))
	}
	sj, err := json.Marshal(tr.State())
	if err != nil {
		return fmt.Errorf("training checkpoint: trainer state: %w", err)
	}
	pj, err := json.Marshal(p)
	if err != nil {
		return fmt.Errorf("training checkpoint: progress: %w", err)
	}
	if f.Meta == nil {
		f.Meta = map[string]string{}
	}
	f.Meta[MetaTrainer] = string(sj)
	f.Meta[MetaProgress] = string(pj)
	return nil
}

// NewTrainingFile is NewModelFile for tr's model followed by AddTrainer.
func NewTrainingFile(tr *rnn.Trainer[float32], v *data.Vocab, runConfig []byte, p Progress) (*File, error) {
	m := tr.Model()
	f, err := NewModelFile(m, m.Config(), v, runConfig)
	if err != nil {
		return nil, err
	}
	if err := AddTrainer(f, tr, p); err != nil {
		return nil, err
	}
	return f, nil
}

// ReadModelConfig returns the model config a checkpoint records.
func ReadModelConfig(f *File) (rnn.Config, error) {
	s, ok := f.Meta[MetaModelConfig]
	if !ok {
		return rnn.Config{}, fmt.Errorf("not a model checkpoint: no %q metadata", MetaModelConfig)
	}
	return unmarshalModelConfig([]byte(s))
}

// ReadVocab returns the vocabulary a checkpoint records.
func ReadVocab(f *File) (*data.Vocab, error) {
	s, ok := f.Meta[MetaVocab]
	if !ok {
		return nil, fmt.Errorf("not a model checkpoint: no %q metadata", MetaVocab)
	}
	v := new(data.Vocab)
	if err := v.UnmarshalJSON([]byte(s)); err != nil {
		return nil, fmt.Errorf("metadata %q: %w", MetaVocab, err)
	}
	return v, nil
}

// ReadTrainerState returns the trainer state of a training checkpoint.
func ReadTrainerState(f *File) (rnn.TrainerState, error) {
	var st rnn.TrainerState
	s, ok := f.Meta[MetaTrainer]
	if !ok {
		return st, fmt.Errorf("not a training checkpoint: no %q metadata", MetaTrainer)
	}
	if err := strictJSON([]byte(s), &st); err != nil {
		return st, fmt.Errorf("metadata %q: %w", MetaTrainer, err)
	}
	return st, nil
}

// ReadProgress returns the run progress of a training checkpoint.
func ReadProgress(f *File) (Progress, error) {
	var p Progress
	s, ok := f.Meta[MetaProgress]
	if !ok {
		return p, fmt.Errorf("not a training checkpoint: no %q metadata", MetaProgress)
	}
	if err := strictJSON([]byte(s), &p); err != nil {
		return p, fmt.Errorf("metadata %q: %w", MetaProgress, err)
	}
	return p, nil
}

func strictJSON(b []byte, v any) error {
	dec := json.NewDecoder(strings.NewReader(string(b)))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return err
	}
	if dec.More() {
		return errors.New("trailing data after the JSON value")
	}
	return nil
}

// ModelFromFile rebuilds the model a verified checkpoint holds: it reads
// the config and vocabulary, builds the network and copies every "model."
// tensor in, checking that the names and shapes are exactly those the
// config gives. path is only recorded in the result.
func ModelFromFile(f *File, path string) (*Model, error) {
	cfg, err := ReadModelConfig(f)
	if err != nil {
		return nil, err
	}
	v, err := ReadVocab(f)
	if err != nil {
		return nil, err
	}
	net, err := rnn.NewModelWithCounts[float32](cfg, VocabCounts(v), 0)
	if err != nil {
		return nil, fmt.Errorf("metadata %q: %w", MetaModelConfig, err)
	}
	if err := CopyModel(net, f); err != nil {
		return nil, err
	}
	m := &Model{Net: net, Vocab: v, Config: net.Config(), Path: path}
	if s, ok := f.Meta[MetaRunConfig]; ok {
		m.RunConfig = []byte(s)
	}
	if _, ok := f.Meta[MetaTrainer]; ok {
		st, err := ReadTrainerState(f)
		if err != nil {
			return nil, err
		}
		m.Step = st.Step
	}
	return m, nil
}

// VocabCounts returns the training count of every entry of v, by id: what
// rnn.NewModelWithCounts makes the classes of a class-based output layer
// from. The checkpoint's vocabulary records the counts, so a model rebuilt
// from it gets the classes it was trained with.
func VocabCounts(v *data.Vocab) []int64 {
	counts := make([]int64, v.Len())
	for id := range counts {
		counts[id] = v.Count(id)
	}
	return counts
}

// CopyModel copies the "model." tensors of f into net's parameters. The
// file must hold exactly one F32 tensor per parameter, with its shape, and
// no other "model." tensor; net is unchanged when it does not.
func CopyModel(net *rnn.Model[float32], f *File) error {
	params := net.Params()
	views := make([]view, len(params))
	for i, p := range params {
		views[i] = view{ModelPrefix + p.Name, p.Shape, p.Value}
	}
	return copyFamily(f, views, ModelPrefix, "model")
}

// RestoreTrainer puts a training checkpoint's state into tr, whose model
// and config must have the shapes the file was written with: the model
// parameters, the optimizer and carried-state tensors and the trainer's
// scalar state. The result continues bit-identically from where the
// writer of the file stopped. tr is unchanged when the file does not fit.
func RestoreTrainer(f *File, tr *rnn.Trainer[float32]) error {
	st, err := ReadTrainerState(f)
	if err != nil {
		return err
	}
	params := tr.Model().Params()
	model := make([]view, len(params))
	for i, p := range params {
		model[i] = view{ModelPrefix + p.Name, p.Shape, p.Value}
	}
	var rest []view
	for _, t := range tr.StateTensors() {
		rest = append(rest, view{t.Name, t.Shape, t.Value})
	}
	// Check everything before writing anything.
	if err := checkFamily(f, model, ModelPrefix, "model"); err != nil {
		return err
	}
	if err := checkFamily(f, rest, OptimPrefix, "optimizer"); err != nil {
		return err
	}
	if err := checkFamily(f, rest, StatePrefix, "trainer state"); err != nil {
		return err
	}
	// SetState checks the scalar state before it changes anything; the
	// tensors are written only when it accepts, and their old values are
	// kept until then.
	saved := make([][]float32, 0, len(model)+len(rest))
	for _, v := range append(append([]view(nil), model...), rest...) {
		saved = append(saved, append([]float32(nil), v.value...))
	}
	writeFamily(f, model)
	writeFamily(f, rest)
	if err := tr.SetState(st); err != nil {
		i := 0
		for _, v := range append(append([]view(nil), model...), rest...) {
			copy(v.value, saved[i])
			i++
		}
		return fmt.Errorf("metadata %q: %w", MetaTrainer, err)
	}
	return nil
}

// view is a destination for one tensor.
type view struct {
	name  string
	shape []int
	value []float32
}

func copyFamily(f *File, views []view, prefix, what string) error {
	if err := checkFamily(f, views, prefix, what); err != nil {
		return err
	}
	writeFamily(f, views)
	return nil
}

// checkFamily checks that the tensors of f with prefix are exactly the
// views with that prefix, as F32 of the same shapes.
func checkFamily(f *File, views []view, prefix, what string) error {
	want := map[string]view{}
	for _, v := range views {
		if strings.HasPrefix(v.name, prefix) {
			want[v.name] = v
		}
	}
	have := map[string]bool{}
	for _, t := range f.Family(prefix) {
		v, ok := want[t.Name]
		if !ok {
			return fmt.Errorf("%s tensor %q does not belong to this model (different config?)", what, t.Name)
		}
		if t.DType != F32 {
			return fmt.Errorf("%s tensor %q is %v, want F32", what, t.Name, t.DType)
		}
		if !sameShape(t.Shape, v.shape) {
			return fmt.Errorf("%s tensor %q has shape %v, want %v", what, t.Name, t.Shape, v.shape)
		}
		have[t.Name] = true
	}
	names := make([]string, 0, len(want))
	for n := range want {
		if !have[n] {
			names = append(names, n)
		}
	}
	if len(names) > 0 {
		sort.Strings(names)
		return fmt.Errorf("%s tensor %q missing from the checkpoint (%d missing in all)", what, names[0], len(names))
	}
	return nil
}

func writeFamily(f *File, views []view) {
	for _, v := range views {
		t := f.Tensor(v.name)
		if err := t.ReadFloat32s(v.value); err != nil {
			panic("checkpoint: " + err.Error()) // checked by checkFamily
		}
	}
}

func sameShape(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// LoadModel loads and verifies the checkpoint at path and rebuilds its
// model (see ModelFromFile).
func LoadModel(path string) (*Model, error) {
	f, err := Load(path)
	if err != nil {
		return nil, err
	}
	m, err := ModelFromFile(f, path)
	if err != nil {
		return nil, fmt.Errorf("load model %q: %w", path, err)
	}
	return m, nil
}

// OpenModelIn loads a model from the checkpoints folder dir (a run
// directory's, see runs.OpenModel). which is "best" (the best-validation
// copy; the default when empty, falling back to the newest valid checkpoint
// when the run has not validated yet), "latest" (the newest valid periodic
// checkpoint), a step number, or a file name inside dir.
func OpenModelIn(dir, which string) (*Model, error) {
	var path string
	switch which {
	case "", "best":
		path = BestPath(dir)
		if _, err := os.Stat(path); errors.Is(err, os.ErrNotExist) {
			return openLatest(dir)
		}
	case "latest":
		return openLatest(dir)
	default:
		if step, err := strconv.ParseInt(which, 10, 64); err == nil && step >= 0 {
			path = StepPath(dir, step)
		} else if strings.ContainsAny(which, `/\`) || which == "." || which == ".." {
			return nil, fmt.Errorf("checkpoint %q: want best, latest, a step number or a file name inside %s", which, dir)
		} else {
			path = filepath.Join(dir, which)
		}
	}
	return LoadModel(path)
}

func openLatest(dir string) (*Model, error) {
	path, f, _, err := LoadNewestValid(dir)
	if err != nil {
		return nil, err
	}
	m, err := ModelFromFile(f, path)
	if err != nil {
		return nil, fmt.Errorf("load model %q: %w", path, err)
	}
	return m, nil
}

// marshalModelConfig writes cfg as a JSON object keyed by the run file's
// key names (the toml tags), so that the metadata reads like the run file.
// laterModelKeys are model keys added after format version 1, each with
// the value that means what a file without the key meant. marshalModelConfig
// writes them only when they differ (or are empty), so a model that does not
// use them is saved byte for byte as before, and older builds still read it.
var laterModelKeys = map[string]any{"output_layer": "full", "output_classes": 0}

func marshalModelConfig(cfg rnn.Config) ([]byte, error) {
	obj := map[string]any{}
	rv := reflect.ValueOf(cfg)
	rt := rv.Type()
	for i := 0; i < rt.NumField(); i++ {
		if key := tomlKey(rt.Field(i)); key != "" {
			if d, ok := laterModelKeys[key]; ok && (rv.Field(i).IsZero() || rv.Field(i).Interface() == d) {
				continue
			}
			obj[key] = rv.Field(i).Interface()
		}
	}
	return json.Marshal(obj) // maps encode with sorted keys
}

func unmarshalModelConfig(b []byte) (rnn.Config, error) {
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(b, &raw); err != nil {
		return rnn.Config{}, fmt.Errorf("metadata %q: %w", MetaModelConfig, err)
	}
	cfg := rnn.DefaultConfig()
	rv := reflect.ValueOf(&cfg).Elem()
	rt := rv.Type()
	known := map[string]bool{}
	for i := 0; i < rt.NumField(); i++ {
		key := tomlKey(rt.Field(i))
		if key == "" {
			continue
		}
		known[key] = true
		if msg, ok := raw[key]; ok {
			if err := json.Unmarshal(msg, rv.Field(i).Addr().Interface()); err != nil {
				return rnn.Config{}, fmt.Errorf("metadata %q: key %s: %w", MetaModelConfig, key, err)
			}
		}
	}
	for k := range raw {
		if !known[k] {
			return rnn.Config{}, fmt.Errorf("metadata %q: unknown key %q (written by a newer weft?)", MetaModelConfig, k)
		}
	}
	if err := cfg.Validate(); err != nil {
		return rnn.Config{}, fmt.Errorf("metadata %q: %w", MetaModelConfig, err)
	}
	return cfg, nil
}

func tomlKey(f reflect.StructField) string {
	if !f.IsExported() {
		return ""
	}
	name := strings.Split(f.Tag.Get("toml"), ",")[0]
	if name == "-" {
		return ""
	}
	return name
}
