package sweep

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	toml "github.com/pelletier/go-toml/v2"

	"weft/configs"
)

// Sweep is a parsed sweep file: the base run file and the runs it varies.
type Sweep struct {
	// Path is the sweep file as given.
	Path string
	// Base is the run file every run starts from, as an absolute path.
	Base string
	// Dir is the sweep directory, as an absolute path.
	Dir string
	// Axes are crossed with one another, the first varying slowest; the
	// keys of one axis are zipped (their lists have one length).
	Axes []Axis
	// Extra are the explicit runs, each a set of keys, after the grid.
	Extra [][]Setting
}

// Axis is one dimension of the grid: one or more keys whose lists of
// values are taken together, value i of each key in the i-th step.
type Axis struct {
	Keys   []string
	Values [][]string // Values[k][i]: key k's i-th value, as TOML text
}

// Len is the number of steps of the axis.
func (a Axis) Len() int {
	if len(a.Values) == 0 {
		return 0
	}
	return len(a.Values[0])
}

// Setting is one run-file key and its value as TOML text (a literal that
// --set accepts: 0.003, "gru", ["a.txt", "b.txt"]).
type Setting struct {
	Key   string `json:"key"`
	Value string `json:"value"`
}

func (s Setting) String() string { return s.Key + "=" + s.Value }

// file is the sweep file's schema, decoded strictly.
type file struct {
	Base      string           `toml:"base"`
	Directory string           `toml:"directory"`
	Axis      []map[string]any `toml:"axis"`
	Extra     []map[string]any `toml:"extra"`
}

// Error is a problem with a sweep file: the file, the key when one is
// concerned, and what is wrong.
type Error struct {
	File string
	Key  string
	Msg  string
}

func (e *Error) Error() string { return e.File + ": " + e.Msg }

// Load reads the sweep file at path.
func Load(path string) (*Sweep, error) {
	src, err := os.ReadFile(path)
	if err != nil {
		var pe *os.PathError
		if errors.As(err, &pe) {
			err = pe.Err
		}
		return nil, &Error{File: path, Msg: "cannot read sweep file: " + err.Error()}
	}
	return Parse(path, src)
}

// Parse is Load for a sweep file already in memory; path names it in
// errors, and the base run file and the sweep directory resolve against
// its folder.
func Parse(path string, src []byte) (*Sweep, error) {
	var f file
	dec := toml.NewDecoder(bytes.NewReader(src)).DisallowUnknownFields()
	if err := dec.Decode(&f); err != nil {
		var sme *toml.StrictMissingError
		if errors.As(err, &sme) && len(sme.Errors) > 0 {
			k := strings.Join(sme.Errors[0].Key(), ".")
			return nil, &Error{File: path, Key: k, Msg: fmt.Sprintf("unknown key %q (a sweep file has base, directory, [[axis]] and [[extra]])", k)}
		}
		var de *toml.DecodeError
		if errors.As(err, &de) {
			row, _ := de.Position()
			return nil, &Error{File: path, Msg: fmt.Sprintf("line %d: %s", row, de.Error())}
		}
		return nil, &Error{File: path, Msg: err.Error()}
	}
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, &Error{File: path, Msg: err.Error()}
	}
	folder := filepath.Dir(abs)
	if f.Base == "" {
		return nil, &Error{File: path, Key: "base", Msg: "base is missing: name the run file the runs start from"}
	}
	sw := &Sweep{Path: path, Base: resolve(folder, f.Base)}
	if f.Directory == "" {
		sw.Dir = strings.TrimSuffix(abs, filepath.Ext(abs)) + ".runs"
	} else {
		sw.Dir = resolve(folder, f.Directory)
	}
	known := map[string]bool{}
	for _, k := range configs.Keys() {
		known[k] = true
	}
	for i, tbl := range f.Axis {
		where := fmt.Sprintf("axis %d", i+1)
		flat, err := flatten(tbl, "")
		if err != nil {
			return nil, &Error{File: path, Msg: where + ": " + err.Error()}
		}
		if len(flat) == 0 {
			return nil, &Error{File: path, Msg: where + ": no keys"}
		}
		var ax Axis
		for _, kv := range flat {
			if !known[kv.key] {
				return nil, unknownKey(path, where, kv.key)
			}
			list, ok := kv.val.([]any)
			if !ok {
				return nil, &Error{File: path, Key: kv.key, Msg: fmt.Sprintf("%s: %s must be a list of values", where, kv.key)}
			}
			if len(list) == 0 {
				return nil, &Error{File: path, Key: kv.key, Msg: fmt.Sprintf("%s: %s has no values", where, kv.key)}
			}
			if len(ax.Keys) > 0 && len(list) != ax.Len() {
				return nil, &Error{File: path, Key: kv.key, Msg: fmt.Sprintf("%s: %s has %d values, %s has %d: the keys of one axis are zipped and need lists of one length",
					where, kv.key, len(list), ax.Keys[0], ax.Len())}
			}
			vals := make([]string, len(list))
			for j, v := range list {
				if vals[j], err = literal(v); err != nil {
					return nil, &Error{File: path, Key: kv.key, Msg: fmt.Sprintf("%s: %s: %v", where, kv.key, err)}
				}
			}
			ax.Keys = append(ax.Keys, kv.key)
			ax.Values = append(ax.Values, vals)
		}
		sw.Axes = append(sw.Axes, ax)
	}
	for i, tbl := range f.Extra {
		where := fmt.Sprintf("extra run %d", i+1)
		flat, err := flatten(tbl, "")
		if err != nil {
			return nil, &Error{File: path, Msg: where + ": " + err.Error()}
		}
		var run []Setting
		for _, kv := range flat {
			if !known[kv.key] {
				return nil, unknownKey(path, where, kv.key)
			}
			v, err := literal(kv.val)
			if err != nil {
				return nil, &Error{File: path, Key: kv.key, Msg: fmt.Sprintf("%s: %s: %v", where, kv.key, err)}
			}
			run = append(run, Setting{kv.key, v})
		}
		sw.Extra = append(sw.Extra, run)
	}
	if len(sw.Axes) == 0 && len(sw.Extra) == 0 {
		return nil, &Error{File: path, Msg: "no runs: add an [[axis]] or an [[extra]] run"}
	}
	return sw, nil
}

func unknownKey(path, where, key string) error {
	return &Error{File: path, Key: key, Msg: fmt.Sprintf("%s: unknown run-file key %q ('weft config keys' lists them)", where, key)}
}

func resolve(folder, p string) string {
	if filepath.IsAbs(p) {
		return filepath.Clean(p)
	}
	return filepath.Join(folder, p)
}

type keyValue struct {
	key string
	val any
}

// flatten turns {model = {cell = [...]}} and {"model.cell" = [...]} alike
// into the key "model.cell", in sorted order (a TOML table has none).
func flatten(tbl map[string]any, prefix string) ([]keyValue, error) {
	names := make([]string, 0, len(tbl))
	for k := range tbl {
		names = append(names, k)
	}
	sort.Strings(names)
	var out []keyValue
	for _, k := range names {
		full := k
		if prefix != "" {
			full = prefix + "." + k
		}
		if sub, ok := tbl[k].(map[string]any); ok {
			kv, err := flatten(sub, full)
			if err != nil {
				return nil, err
			}
			out = append(out, kv...)
			continue
		}
		out = append(out, keyValue{full, tbl[k]})
	}
	if prefix == "" {
		seen := map[string]bool{}
		for _, kv := range out {
			if seen[kv.key] {
				return nil, fmt.Errorf("key %s given twice", kv.key)
			}
			seen[kv.key] = true
		}
	}
	return out, nil
}

// literal writes a decoded TOML value back as TOML text, the form --set
// takes: the same text for the same value, so that plans compare.
func literal(v any) (string, error) {
	switch x := v.(type) {
	case string:
		return quote(x), nil
	case bool:
		return strconv.FormatBool(x), nil
	case int64:
		return strconv.FormatInt(x, 10), nil
	case float64:
		switch {
		case math.IsNaN(x):
			return "nan", nil
		case math.IsInf(x, 1):
			return "inf", nil
		case math.IsInf(x, -1):
			return "-inf", nil
		}
		s := strconv.FormatFloat(x, 'g', -1, 64)
		if !strings.ContainsAny(s, ".eEn") {
			s += ".0"
		}
		return s, nil
	case []any:
		parts := make([]string, len(x))
		for i, e := range x {
			p, err := literal(e)
			if err != nil {
				return "", err
			}
			parts[i] = p
		}
		return "[" + strings.Join(parts, ", ") + "]", nil
	case time.Time, toml.LocalDate, toml.LocalDateTime, toml.LocalTime:
		return "", fmt.Errorf("dates and times are not run-file values")
	case map[string]any:
		return "", fmt.Errorf("a table is not a run-file value")
	}
	return "", fmt.Errorf("unsupported value %v", v)
}

// Key of a run's settings, independent of their order: what makes two
// runs the same run.
func settingsID(ss []Setting) string {
	c := slices.Clone(ss)
	sort.Slice(c, func(i, j int) bool { return c[i].Key < c[j].Key })
	parts := make([]string, len(c))
	for i, s := range c {
		parts[i] = s.String()
	}
	return strings.Join(parts, " ")
}

// quote writes s as a TOML basic string.
func quote(s string) string {
	var b strings.Builder
	b.WriteByte('"')
	for _, r := range s {
		switch {
		case r == '"' || r == '\\':
			b.WriteByte('\\')
			b.WriteRune(r)
		case r < 0x20 || r == 0x7f:
			fmt.Fprintf(&b, "\\u%04X", r)
		default:
			b.WriteRune(r)
		}
	}
	b.WriteByte('"')
	return b.String()
}
