package configs

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"sort"
	"strings"
	"time"

	toml "github.com/pelletier/go-toml/v2"

	"weft/data"
	"weft/eval"
	"weft/rnn"
)

// Error is a problem with a run file or an override: it names the file (or
// "--set" for an override), the line when one is known, and the key.
type Error struct {
	File  string // the run file, or "--set"
	Line  int    // 1-based; 0 when unknown
	Key   string // "section.key", or "" for the file as a whole
	Value string // the value an override gave Key, when it is the problem
	Msg   string
}

func (e *Error) Error() string {
	if e.File == "--set" && e.Value != "" {
		return fmt.Sprintf("--set %s=%s: %s", e.Key, e.Value, e.Msg)
	}
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	return b.String()
}

// Default returns the run with every key at its documented default.
func Default() Run {
	return Run{
		Data:  data.DefaultConfig(),
		Model: rnn.DefaultConfig(),
		Training: Training{
			TrainConfig:        rnn.DefaultTrainConfig(),
			DivergenceFactor:   4,
			DivergenceRetries:  3,
			DivergenceLRFactor: 0.5,
		},
		Evaluation: Evaluation{Config: eval.DefaultConfig()},
		Checkpoint: Checkpoint{
			EverySteps:   500,
			EveryMinutes: 10,
			KeepLast:     3,
			OnSaveError:  "continue",
		},
		Output: Output{
			LogEverySeconds:   30,
			MetricsEverySteps: 10,
			Plots:             true,
		},
	}
}

// Load reads the run file at path, applies the overrides ("section.key=value",
// in order) and checks the result. Relative paths in data.files resolve
// against the folder of the file.
func Load(path string, overrides []string) (*Run, error) {
	src, err := os.ReadFile(path)
	if err != nil {
		var pe *os.PathError
		if errors.As(err, &pe) {
			err = pe.Err
		}
		return nil, &Error{File: path, Msg: "cannot read run file: " + err.Error()}
	}
	return Parse(path, src, overrides)
}

// Parse is Load for a run file already in memory; name is used in errors and
// its folder resolves relative paths.
func Parse(name string, src []byte, overrides []string) (*Run, error) {
	r := Default()
	lines := indexKeys(src)
	if err := decodeStrict(name, src, &r, lines); err != nil {
		return nil, err
	}
	set := map[string]string{} // key -> value, of the overrides
	for _, o := range overrides {
		if err := applyOverride(&r, o); err != nil {
			return nil, err
		}
		key, val, _ := strings.Cut(o, "=")
		set[strings.TrimSpace(key)] = strings.TrimSpace(val)
	}
	resolvePaths(&r, filepath.Dir(name))
	if err := validate(&r, name, lines, set); err != nil {
		return nil, err
	}
	return &r, nil
}

// Encode writes r as a run file. Parsing the output gives r again.
func Encode(r *Run) ([]byte, error) {
	var b bytes.Buffer
	enc := toml.NewEncoder(&b)
	enc.SetIndentTables(false)
	if err := enc.Encode(r); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

func decodeStrict(name string, src []byte, r *Run, lines map[string]int) error {
	if !isText(src) {
		return &Error{File: name, Msg: "not a text file (a run file is TOML text)"}
	}
	dec := toml.NewDecoder(bytes.NewReader(src)).DisallowUnknownFields()
	err := dec.Decode(r)
	if err == nil {
		return nil
	}
	var strict *toml.StrictMissingError
	if errors.As(err, &strict) && len(strict.Errors) > 0 {
		e := strict.Errors[0]
		row, _ := e.Position()
		key := strings.Join(e.Key(), ".")
		msg := "unknown key " + key
		if s := suggest(key); s != "" {
			msg += "; did you mean " + s + "?"
		}
		if n := len(strict.Errors); n > 1 {
			msg += fmt.Sprintf(" (and %d more unknown keys)", n-1)
		}
		return &Error{File: name, Line: row, Key: key, Msg: msg}
	}
	var de *toml.DecodeError
	if errors.As(err, &de) {
		row, _ := de.Position()
		key := strings.Join(de.Key(), ".")
		msg := de.Error()
		msg = strings.TrimPrefix(msg, "toml: ")
		if key != "" {
			msg = "key " + key + ": " + cleanTypeMessage(msg)
		}
		return &Error{File: name, Line: row, Key: key, Msg: msg}
	}
	return &Error{File: name, Msg: strings.TrimPrefix(err.Error(), "toml: ")}
}

// cleanTypeMessage turns go-toml's mention of Go struct fields into words a
// user knows: "cannot decode TOML string into struct field rnn.Config.Layers
// of type int" becomes "want an integer, got a string".
var typeMsg = regexp.MustCompile(`cannot decode TOML (\w+) into .* of type (\S+)`)

func cleanTypeMessage(msg string) string {
	m := typeMsg.FindStringSubmatch(msg)
	if m == nil {
		return msg
	}
	return "want " + goTypeWord(m[2]) + ", got " + tomlWord(m[1])
}

func goTypeWord(t string) string {
	switch {
	case strings.HasPrefix(t, "[]"):
		return "a list"
	case strings.HasPrefix(t, "int"), strings.HasPrefix(t, "uint"):
		return "an integer"
	case strings.HasPrefix(t, "float"):
		return "a number"
	case t == "bool":
		return "true or false"
	case t == "string":
		return "a string"
	}
	return "a " + t
}

func tomlWord(w string) string {
	switch w {
	case "integer", "array":
		return "an " + w
	}
	return "a " + w
}

func isText(src []byte) bool {
	return !bytes.ContainsRune(src, 0)
}

// Keys lists every key a run file may hold, as "section.key", sorted.
func Keys() []string {
	var out []string
	walkKeys(reflect.TypeOf(Run{}), "", func(key string, _ reflect.StructField) {
		out = append(out, key)
	})
	sort.Strings(out)
	return out
}

// walkKeys calls fn for every leaf key of the struct type t, flattening
// embedded structs as the TOML decoder does.
func walkKeys(t reflect.Type, prefix string, fn func(key string, f reflect.StructField)) {
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		if f.Anonymous && f.Type.Kind() == reflect.Struct {
			walkKeys(f.Type, prefix, fn)
			continue
		}
		name := strings.Split(f.Tag.Get("toml"), ",")[0]
		if name == "" || name == "-" {
			continue
		}
		key := name
		if prefix != "" {
			key = prefix + "." + name
		}
		if prefix == "" && f.Type.Kind() == reflect.Struct {
			walkKeys(f.Type, key, fn)
			continue
		}
		fn(key, f)
	}
}

// suggest returns the known key closest to key, or "" when none is close.
// A misspelled section is corrected first ("traning.seed" gives
// "training.seed", a bare "traning" gives "training").
func suggest(key string) string {
	if sec, leaf, _ := strings.Cut(key, "."); !knownSection(sec) {
		if fixed := closestSection(sec); fixed != "" {
			if leaf == "" {
				return fixed
			}
			return suggest(fixed + "." + leaf)
		}
	}
	return suggestKey(key)
}

func knownSection(sec string) bool {
	for _, k := range Keys() {
		if strings.HasPrefix(k, sec+".") {
			return true
		}
	}
	return false
}

// closestSection returns the section name within about one edit in four
// characters of sec, or "".
func closestSection(sec string) string {
	best, bestD := "", len(sec)/4+2
	seen := map[string]bool{}
	for _, k := range Keys() {
		s, _, _ := strings.Cut(k, ".")
		if seen[s] {
			continue
		}
		seen[s] = true
		if d := editDistance(sec, s); d < bestD {
			best, bestD = s, d
		}
	}
	return best
}

func suggestKey(key string) string {
	best, bestD := "", 1<<30
	section := ""
	if i := strings.IndexByte(key, '.'); i >= 0 {
		section = key[:i]
	}
	for _, k := range Keys() {
		d := editDistance(key, k)
		// Prefer keys of the same section on ties.
		if d < bestD || (d == bestD && section != "" && strings.HasPrefix(k, section+".")) {
			best, bestD = k, d
		}
	}
	// Allow about one edit in four characters of the leaf name.
	leaf := key[strings.LastIndexByte(key, '.')+1:]
	limit := len(leaf)/4 + 1
	if bestD <= limit {
		return best
	}
	// A key put in the wrong section: the same leaf elsewhere.
	for _, k := range Keys() {
		if strings.HasSuffix(k, "."+leaf) {
			return k
		}
	}
	return ""
}

func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

// indexKeys maps "section.key" to the line that sets it, by a plain scan of
// table headers and "key =" lines (enough for the flat files weft reads).
func indexKeys(src []byte) map[string]int {
	out := map[string]int{}
	section := ""
	for i, line := range strings.Split(string(src), "\n") {
		s := strings.TrimSpace(line)
		if s == "" || s[0] == '#' {
			continue
		}
		if s[0] == '[' {
			end := strings.IndexByte(s, ']')
			if end > 0 {
				section = strings.TrimSpace(strings.Trim(s[:end], "[]"))
				out[section] = i + 1
			}
			continue
		}
		if eq := strings.IndexByte(s, '='); eq > 0 {
			k := strings.Trim(strings.TrimSpace(s[:eq]), `"'`)
			full := k
			if section != "" {
				full = section + "." + k
			}
			out[full] = i + 1
		}
	}
	return out
}

// applyOverride sets one "section.key=value" on r with the same strict
// checks as the file. The value is TOML ("0.5", "true", "['a.txt']"); a bare
// word that is not valid TOML is taken as a string, and a comma-separated
// list of bare words is taken as a list of strings.
func applyOverride(r *Run, o string) error {
	eq := strings.IndexByte(o, '=')
	if eq <= 0 {
		return &Error{File: "--set", Msg: fmt.Sprintf("%q is not key=value", o)}
	}
	key, val := strings.TrimSpace(o[:eq]), strings.TrimSpace(o[eq+1:])
	dot := strings.IndexByte(key, '.')
	if dot <= 0 || dot == len(key)-1 {
		msg := fmt.Sprintf("key %q must be section.key", key)
		if s := suggest(key); s != "" {
			msg += "; did you mean " + s + "?"
		}
		return &Error{File: "--set", Key: key, Msg: msg}
	}
	section, leaf := key[:dot], key[dot+1:]
	try := func(v string) error {
		doc := fmt.Sprintf("[%s]\n%s = %s\n", section, leaf, v)
		return decodeStrict("--set", []byte(doc), r, nil)
	}
	err := try(val)
	var ce *Error
	if err != nil && errors.As(err, &ce) && !strings.HasPrefix(ce.Msg, "unknown key") {
		// Not valid TOML as written: try it as a plain string, then as a
		// list of plain strings.
		err2 := try(quoteTOML(val))
		if err2 == nil {
			return nil
		}
		if ce.Key == "" {
			// The value did not even parse: the plain string's complaint
			// (a type, "want an integer, got a string") says more than
			// the parser's.
			err = err2
			errors.As(err, &ce)
		}
		parts := strings.Split(val, ",")
		for i, p := range parts {
			parts[i] = quoteTOML(strings.TrimSpace(p))
		}
		if err3 := try("[" + strings.Join(parts, ", ") + "]"); err3 == nil {
			return nil
		}
	}
	if err != nil && errors.As(err, &ce) {
		ce.Line = 0
		ce.Msg = strings.Replace(ce.Msg, "key "+key+": ", "", 1)
		if !strings.HasPrefix(ce.Msg, "unknown key") {
			ce.Key, ce.Value = key, val
		}
	}
	return err
}

func quoteTOML(s string) string {
	return `"` + strings.NewReplacer(`\`, `\\`, `"`, `\"`).Replace(s) + `"`
}

func resolvePaths(r *Run, dir string) {
	for i, f := range r.Data.Files {
		if f == "-" || filepath.IsAbs(f) || dir == "" {
			continue
		}
		r.Data.Files[i] = filepath.Join(dir, f)
	}
}

// validate checks every section, then the run-level keys, and names the
// override when one set the offending key (set: key to value), or else the
// line of the file that sets it.
func validate(r *Run, name string, lines map[string]int, set map[string]string) error {
	checks := []struct {
		section string
		err     error
	}{
		{"data", r.Data.Validate()},
		{"model", r.Model.Validate()},
		{"training", trainValidate(r.Training.TrainConfig)},
		{"evaluation", r.Evaluation.Config.Validate()},
		{"training", r.Training.validate()},
		{"checkpoint", r.Checkpoint.validate()},
		{"output", r.Output.validate()},
	}
	for _, c := range checks {
		if c.err == nil {
			continue
		}
		key := keyInMessage(c.section, c.err.Error())
		msg := c.err.Error()
		if v, ok := set[key]; ok && key != "" {
			msg = strings.TrimPrefix(strings.TrimPrefix(msg, key+": "), key+" ")
			return &Error{File: "--set", Key: key, Value: v, Msg: msg}
		}
		if key != "" && !strings.Contains(msg, key) {
			msg = key + ": " + msg
		}
		return &Error{File: name, Line: lines[key], Key: key, Msg: msg}
	}
	return nil
}

var wordRE = regexp.MustCompile(`[a-z][a-z0-9_.]*`)

// keyInMessage finds the key a package's validation message is about: a full
// "section.key" if it names one, else a leaf key of the section.
func keyInMessage(section, msg string) string {
	known := map[string]bool{}
	for _, k := range Keys() {
		known[k] = true
	}
	words := wordRE.FindAllString(msg, -1)
	for _, w := range words {
		if known[w] {
			return w
		}
	}
	for _, w := range words {
		if known[section+"."+w] {
			return section + "." + w
		}
	}
	return ""
}

// trainValidate is TrainConfig.Validate but for the missing length of an
// annealing schedule, which a run with a time budget plans at its start
// (the flags --for and --until are not known here); runs.Train refuses
// the run when it has no time budget either.
func trainValidate(c rnn.TrainConfig) error {
	if err := c.Validate(); !errors.Is(err, rnn.ErrNoDecayLength) {
		return err
	}
	return nil
}

func (t *Training) validate() error {
	switch {
	case t.MaxEpochs < 0:
		return fmt.Errorf("training.max_epochs must not be negative, got %d", t.MaxEpochs)
	case t.MaxTokens < 0:
		return fmt.Errorf("training.max_tokens must not be negative, got %d", t.MaxTokens)
	case t.EarlyStopPatience < 0:
		return fmt.Errorf("training.early_stop_patience must not be negative, got %d", t.EarlyStopPatience)
	case t.DivergenceFactor < 0:
		return fmt.Errorf("training.divergence_factor must not be negative, got %g", t.DivergenceFactor)
	case t.DivergenceFactor > 0 && t.DivergenceFactor <= 1:
		return fmt.Errorf("training.divergence_factor must be above 1 (or 0 to check only NaN), got %g", t.DivergenceFactor)
	case t.DivergenceRetries < 0:
		return fmt.Errorf("training.divergence_retries must not be negative, got %d", t.DivergenceRetries)
	case !(t.DivergenceLRFactor > 0 && t.DivergenceLRFactor < 1):
		return fmt.Errorf("training.divergence_lr_factor must be above 0 and below 1, got %g", t.DivergenceLRFactor)
	case !(t.WindowVariation >= 0 && t.WindowVariation < 1):
		return fmt.Errorf("training.window_variation must be from 0 to below 1, got %g", t.WindowVariation)
	case t.WindowVariation > 0 && t.BPTTAdvanceSteps > 0:
		return fmt.Errorf("training.window_variation needs training.bptt_advance_steps = 0 (replay windows have a fixed length)")
	}
	if t.MaxDuration != "" {
		d, err := time.ParseDuration(t.MaxDuration)
		if err != nil || d <= 0 {
			return fmt.Errorf("training.max_duration %q is not a positive duration such as \"8h\" or \"90m\"", t.MaxDuration)
		}
	}
	return nil
}

func (c *Checkpoint) validate() error {
	switch {
	case c.EverySteps < 0:
		return fmt.Errorf("checkpoint.every_steps must not be negative, got %d", c.EverySteps)
	case c.EveryMinutes < 0:
		return fmt.Errorf("checkpoint.every_minutes must not be negative, got %g", c.EveryMinutes)
	case c.KeepLast < 1:
		return fmt.Errorf("checkpoint.keep_last must be at least 1, got %d", c.KeepLast)
	case c.OnSaveError != "continue" && c.OnSaveError != "stop":
		return fmt.Errorf("checkpoint.on_save_error must be \"continue\" or \"stop\", got %q", c.OnSaveError)
	}
	return nil
}

func (o *Output) validate() error {
	switch {
	case o.LogEverySeconds <= 0:
		return fmt.Errorf("output.log_every_seconds must be above 0, got %g", o.LogEverySeconds)
	case o.MetricsEverySteps < 1:
		return fmt.Errorf("output.metrics_every_steps must be at least 1, got %d", o.MetricsEverySteps)
	}
	return nil
}
