package configs

import (
	"embed"
	"fmt"
	"sort"
	"strings"
)

//go:embed presets/*.toml
var presetFS embed.FS

// Preset is a starter run file embedded in the binary.
type Preset struct {
	Name    string // file name without .toml, such as "char-small"
	Summary string // the first comment line after the title
	Text    []byte // the commented run file
}

// DefaultPreset is the preset `weft config new` writes when none is named.
const DefaultPreset = "char-small"

// Presets lists the embedded presets, sorted by name.
func Presets() []Preset {
	entries, err := presetFS.ReadDir("presets")
	if err != nil {
		panic("configs: embedded presets missing: " + err.Error())
	}
	var out []Preset
	for _, e := range entries {
		text, err := presetFS.ReadFile("presets/" + e.Name())
		if err != nil {
			panic("configs: " + err.Error())
		}
		out = append(out, Preset{
			Name:    strings.TrimSuffix(e.Name(), ".toml"),
			Summary: summary(text),
			Text:    text,
		})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out
}

// LookupPreset returns the preset called name.
func LookupPreset(name string) (Preset, error) {
	var names []string
	for _, p := range Presets() {
		if p.Name == name {
			return p, nil
		}
		names = append(names, p.Name)
	}
	return Preset{}, fmt.Errorf("no preset %q (presets: %s)", name, strings.Join(names, ", "))
}

// summary is the text after "weft run file: " on the first line.
func summary(text []byte) string {
	first, _, _ := strings.Cut(string(text), "\n")
	first = strings.TrimSpace(strings.TrimPrefix(first, "#"))
	first = strings.TrimPrefix(first, "weft run file: ")
	return strings.TrimSuffix(first, ".")
}
