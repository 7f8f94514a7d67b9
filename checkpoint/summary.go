package checkpoint

import (
	"errors"
	"slices"
	"strconv"
	"strings"
)

// Summary describes a checkpoint for display (weft inspect) and for
// scripts (its JSON form).
type Summary struct {
	Path string `json:"path,omitempty"`
	// Valid reports whether the file passed Load's full verification.
	Valid bool `json:"valid"`
	// Problem is the verification error when Valid is false.
	Problem string `json:"problem,omitempty"`
	// FormatVersion is 0 when the file is not a readable weft checkpoint.
	FormatVersion int    `json:"format_version"`
	Checksum      string `json:"checksum,omitempty"`
	// MetadataKeys lists the caller's metadata keys, sorted.
	MetadataKeys []string     `json:"metadata_keys"`
	Tensors      []TensorInfo `json:"tensors"`
	// Elements and Bytes total the tensors of each family: "model",
	// "optim", "state" and "other".
	Elements map[string]int64 `json:"elements"`
	Bytes    map[string]int64 `json:"bytes"`
}

// TensorInfo is one row of a Summary's tensor table.
type TensorInfo struct {
	Name   string `json:"name"`
	DType  DType  `json:"dtype"`
	Shape  []int  `json:"shape"`
	Bytes  int64  `json:"bytes"`
	Family string `json:"family"`
}

// Family returns the family of a tensor name: "model", "optim", "state"
// or "other".
func Family(name string) string {
	for _, p := range []string{ModelPrefix, OptimPrefix, StatePrefix} {
		if strings.HasPrefix(name, p) {
			return strings.TrimSuffix(p, ".")
		}
	}
	return "other"
}

// Summarize describes f, taken as valid. The tensor table is sorted by name.
func Summarize(f *File) Summary {
	s := Summary{
		Valid:         true,
		FormatVersion: f.Version,
		Checksum:      f.Checksum,
		MetadataKeys:  []string{},
		Tensors:       []TensorInfo{},
		Elements:      map[string]int64{},
		Bytes:         map[string]int64{},
	}
	for k := range f.Meta {
		s.MetadataKeys = append(s.MetadataKeys, k)
	}
	slices.Sort(s.MetadataKeys)
	for i := range f.Tensors {
		t := &f.Tensors[i]
		fam := Family(t.Name)
		s.Tensors = append(s.Tensors, TensorInfo{Name: t.Name, DType: t.DType, Shape: cloneShape(t.Shape), Bytes: int64(len(t.Data)), Family: fam})
		s.Elements[fam] += int64(len(t.Data) / max(t.DType.Size(), 1))
		s.Bytes[fam] += int64(len(t.Data))
	}
	slices.SortFunc(s.Tensors, func(a, b TensorInfo) int { return strings.Compare(a.Name, b.Name) })
	return s
}

// Inspect verifies the file at path and describes it. A damaged or
// unsupported file is not an error: the Summary says Valid false with the
// Problem, and still lists what its header shows when the safetensors
// structure is readable. The error is for files that cannot be read at all
// (missing, unreadable).
func Inspect(path string) (Summary, error) {
	f, err := Load(path)
	if err == nil {
		s := Summarize(f)
		s.Path = path
		return s, nil
	}
	if !errors.Is(err, ErrCorrupt) && !errors.Is(err, ErrVersion) {
		return Summary{}, err
	}
	s := Summary{MetadataKeys: []string{}, Tensors: []TensorInfo{}, Elements: map[string]int64{}, Bytes: map[string]int64{}}
	if raw, rerr := LoadSafetensors(path); rerr == nil {
		meta := raw.Meta
		raw.Meta = map[string]string{}
		for k, v := range meta {
			if !strings.HasPrefix(k, ReservedPrefix) {
				raw.Meta[k] = v
			}
		}
		s = Summarize(raw)
		s.Checksum = meta[MetaChecksum]
		s.FormatVersion, _ = strconv.Atoi(meta[MetaVersion])
	}
	s.Path, s.Valid, s.Problem = path, false, err.Error()
	return s, nil
}
