package checkpoint

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode/utf8"
)

// Format versions. A weft checkpoint records its version under
// MetaVersion; Decode accepts MinVersion through MaxVersion, and Encode
// writes CurrentVersion unless File.Version says otherwise.
const (
	MinVersion     = 1
	MaxVersion     = 1
	CurrentVersion = 1
)

// Reserved metadata keys. Every key starting with ReservedPrefix belongs to
// this package: Encode refuses them in File.Meta and Decode removes them
// from it.
const (
	ReservedPrefix = "weft."
	MetaVersion    = "weft.format_version"
	MetaChecksum   = "weft.checksum"
)

// Tensor name families. The caller chooses the names; by convention a
// checkpoint keeps the model's parameters apart from the training state, so
// that a general framework can take the model.* tensors alone.
const (
	ModelPrefix = "model." // parameters of the model
	OptimPrefix = "optim." // optimizer moments and accumulators
	StatePrefix = "state." // other trainer state (carried hidden state, RNG words, ...)
)

// MaxHeaderBytes caps the JSON header a decoder accepts (100 MiB; the
// reference safetensors implementation has a cap of the same order, 100 MB,
// from memory), so that a damaged length field cannot make it allocate or
// scan a huge buffer.
const MaxHeaderBytes = 100 << 20

const (
	metadataKey = "__metadata__"
	checksumLen = 2 * sha256.Size
	headerAlign = 8
)

// ErrCorrupt is wrapped by every error that reports a damaged or malformed
// file: truncation, a bad header, inconsistent offsets, a checksum mismatch.
var ErrCorrupt = errors.New("corrupt checkpoint")

// ErrVersion is wrapped by the error for an intact checkpoint whose format
// version lies outside [MinVersion, MaxVersion].
var ErrVersion = errors.New("unsupported checkpoint format version")

// formatError carries a complete message and the sentinel it reports.
type formatError struct {
	kind error
	msg  string
}

func (e *formatError) Error() string { return e.msg }
func (e *formatError) Unwrap() error { return e.kind }

func corruptf(format string, args ...any) error {
	return &formatError{kind: ErrCorrupt, msg: fmt.Sprintf(format, args...)}
}

// File is the content of one checkpoint: string metadata and named tensors.
type File struct {
	// Version is the format version. Decode sets it from the file; Encode
	// writes CurrentVersion when it is zero.
	Version int

	// Meta holds the caller's metadata (resolved config, vocabulary, trainer
	// state, usually as JSON strings). Keys starting with ReservedPrefix are
	// not allowed; keys and values must be valid UTF-8.
	Meta map[string]string

	// Tensors in any order; Encode writes them sorted by name and the
	// decoders return them sorted by name. Names must be unique, non-empty,
	// valid UTF-8 and not "__metadata__".
	Tensors []Tensor

	// Checksum is the lowercase hex SHA-256 read from the file by Decode
	// (empty from DecodeSafetensors). Encode ignores it.
	Checksum string
}

// Tensor returns the tensor called name, or nil.
func (f *File) Tensor(name string) *Tensor {
	for i := range f.Tensors {
		if f.Tensors[i].Name == name {
			return &f.Tensors[i]
		}
	}
	return nil
}

// Family returns the tensors whose names start with prefix (ModelPrefix,
// OptimPrefix, StatePrefix or the caller's own), in the order of f.Tensors.
func (f *File) Family(prefix string) []*Tensor {
	var out []*Tensor
	for i := range f.Tensors {
		if strings.HasPrefix(f.Tensors[i].Name, prefix) {
			out = append(out, &f.Tensors[i])
		}
	}
	return out
}

// Encode returns the bytes of f as a weft checkpoint: the canonical
// safetensors layout described in the package documentation, with the
// format version and the checksum in __metadata__. Equal content always
// gives identical bytes. f is not modified.
func Encode(f *File) ([]byte, error) {
	version := f.Version
	if version == 0 {
		version = CurrentVersion
	}
	if version < MinVersion || version > MaxVersion {
		return nil, fmt.Errorf("encode checkpoint: format version %d outside supported %d to %d", version, MinVersion, MaxVersion)
	}
	for k, v := range f.Meta {
		if strings.HasPrefix(k, ReservedPrefix) {
			return nil, fmt.Errorf("encode checkpoint: metadata key %q uses the reserved prefix %q", k, ReservedPrefix)
		}
		if !utf8.ValidString(k) || !utf8.ValidString(v) {
			return nil, fmt.Errorf("encode checkpoint: metadata key %q: key and value must be valid UTF-8", k)
		}
	}
	ts := make([]*Tensor, len(f.Tensors))
	for i := range f.Tensors {
		t := &f.Tensors[i]
		if err := checkTensor(t); err != nil {
			return nil, fmt.Errorf("encode checkpoint: %w", err)
		}
		ts[i] = t
	}
	slices.SortFunc(ts, func(a, b *Tensor) int { return strings.Compare(a.Name, b.Name) })
	for i := 1; i < len(ts); i++ {
		if ts[i].Name == ts[i-1].Name {
			return nil, fmt.Errorf("encode checkpoint: two tensors named %q", ts[i].Name)
		}
	}
	meta := make(map[string]string, len(f.Meta)+2)
	for k, v := range f.Meta {
		meta[k] = v
	}
	meta[MetaVersion] = strconv.Itoa(version)
	meta[MetaChecksum] = strings.Repeat("0", checksumLen)
	hdr, sumAt := appendHeader(nil, meta, ts)

	size := len(hdr)
	for _, t := range ts {
		size += len(t.Data)
	}
	out := make([]byte, 0, size)
	out = append(out, hdr...)
	for _, t := range ts {
		out = append(out, t.Data...)
	}
	sum := sha256.Sum256(out)
	hex.Encode(out[sumAt:sumAt+checksumLen], sum[:])
	return out, nil
}

// checkTensor reports why t cannot be written, or nil.
func checkTensor(t *Tensor) error {
	switch {
	case t.Name == "":
		return errors.New("tensor with an empty name")
	case t.Name == metadataKey:
		return fmt.Errorf("tensor name %q is reserved", t.Name)
	case !utf8.ValidString(t.Name):
		return fmt.Errorf("tensor name %q is not valid UTF-8", t.Name)
	case !t.DType.Valid():
		return fmt.Errorf("tensor %q: invalid dtype %v", t.Name, t.DType)
	}
	n, ok := numElements(t.Shape)
	if !ok {
		return fmt.Errorf("tensor %q: invalid shape %v", t.Name, t.Shape)
	}
	if n > math.MaxInt/t.DType.Size() || n*t.DType.Size() != len(t.Data) {
		return fmt.Errorf("tensor %q: %d data bytes, want %d elements of %v for shape %v", t.Name, len(t.Data), n, t.DType, t.Shape)
	}
	return nil
}

// appendHeader appends the 8-byte length field and the canonical padded
// JSON header for meta and the name-sorted tensors ts, and returns the
// offset in the result where the checksum value's 64 characters start.
func appendHeader(b []byte, meta map[string]string, ts []*Tensor) ([]byte, int) {
	start := len(b)
	b = append(b, make([]byte, 8)...)
	sumAt := -1
	b = append(b, `{"`+metadataKey+`":{`...)
	keys := make([]string, 0, len(meta))
	for k := range meta {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for i, k := range keys {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendJSONString(b, k)
		b = append(b, ':')
		if k == MetaChecksum {
			sumAt = len(b) + 1 // after the opening quote
		}
		b = appendJSONString(b, meta[k])
	}
	b = append(b, '}')
	off := 0
	for _, t := range ts {
		b = append(b, ',')
		b = appendJSONString(b, t.Name)
		b = append(b, `:{"dtype":"`...)
		b = append(b, t.DType.String()...)
		b = append(b, `","shape":[`...)
		for i, d := range t.Shape {
			if i > 0 {
				b = append(b, ',')
			}
			b = strconv.AppendInt(b, int64(d), 10)
		}
		b = append(b, `],"data_offsets":[`...)
		b = strconv.AppendInt(b, int64(off), 10)
		b = append(b, ',')
		off += len(t.Data)
		b = strconv.AppendInt(b, int64(off), 10)
		b = append(b, "]}"...)
	}
	b = append(b, '}')
	for (len(b)-start)%headerAlign != 0 {
		b = append(b, ' ')
	}
	binary.LittleEndian.PutUint64(b[start:], uint64(len(b)-start-8))
	return b, sumAt
}

// appendJSONString appends s as a JSON string, escaped as encoding/json
// does (so <, > and & become \u003c, \u003e and \u0026).
func appendJSONString(b []byte, s string) []byte {
	q, err := json.Marshal(s)
	if err != nil {
		panic("checkpoint: " + err.Error()) // cannot happen for a string
	}
	return append(b, q...)
}

// Decode reads a weft checkpoint from data, verifying it completely before
// returning: the safetensors structure (as DecodeSafetensors), the
// canonical header form that Encode writes, the checksum, and the format
// version. Every failure wraps ErrCorrupt, except an intact file of an
// unsupported version, which wraps ErrVersion. The returned tensors' Data
// share data's memory.
func Decode(data []byte) (*File, error) {
	f, err := DecodeSafetensors(data)
	if err != nil {
		return nil, err
	}
	sum, ok := f.Meta[MetaChecksum]
	if !ok {
		return nil, corruptf("not a weft checkpoint: no %q in %s (a plain safetensors file reads with DecodeSafetensors)", MetaChecksum, metadataKey)
	}
	vs, ok := f.Meta[MetaVersion]
	if !ok {
		return nil, corruptf("not a weft checkpoint: no %q in %s", MetaVersion, metadataKey)
	}
	if len(sum) != checksumLen || strings.Trim(sum, "0123456789abcdef") != "" {
		return nil, corruptf("checksum %q is not %d lowercase hex digits", sum, checksumLen)
	}
	version, err := strconv.Atoi(vs)
	if err != nil || version < 0 || strconv.Itoa(version) != vs {
		return nil, corruptf("format version %q is not a decimal number", vs)
	}

	ts := make([]*Tensor, len(f.Tensors))
	for i := range f.Tensors {
		ts[i] = &f.Tensors[i]
	}
	want, sumAt := appendHeader(nil, f.Meta, ts)
	n := len(want)
	if !bytes.Equal(want, data[:min(n, len(data))]) {
		at := 0
		for at < n && at < len(data) && want[at] == data[at] {
			at++
		}
		return nil, corruptf("header is not in the canonical form weft writes (first difference at byte %d)", at)
	}
	h := sha256.New()
	h.Write(data[:sumAt])
	h.Write([]byte(strings.Repeat("0", checksumLen)))
	h.Write(data[sumAt+checksumLen:])
	if got := hex.EncodeToString(h.Sum(nil)); got != sum {
		return nil, corruptf("checksum mismatch: content hashes to %.12s..., the file says %.12s...", got, sum)
	}
	if version < MinVersion || version > MaxVersion {
		if version > MaxVersion {
			return nil, &formatError{kind: ErrVersion, msg: fmt.Sprintf("format version %d newer than supported %d (written by a newer weft)", version, MaxVersion)}
		}
		return nil, &formatError{kind: ErrVersion, msg: fmt.Sprintf("format version %d older than the oldest supported %d", version, MinVersion)}
	}
	for k := range f.Meta {
		if strings.HasPrefix(k, ReservedPrefix) && k != MetaVersion && k != MetaChecksum {
			return nil, corruptf("unknown reserved metadata key %q for format version %d", k, version)
		}
	}
	delete(f.Meta, MetaVersion)
	delete(f.Meta, MetaChecksum)
	f.Version = version
	f.Checksum = sum
	return f, nil
}

// headerEntry is one tensor's entry in the JSON header.
type headerEntry struct {
	DType       string    `json:"dtype"`
	Shape       *[]int64  `json:"shape"`
	DataOffsets *[]uint64 `json:"data_offsets"`
}

// DecodeSafetensors reads any safetensors file from data, checking its
// structure before using it: the header length against MaxHeaderBytes and
// the data size, the JSON, each tensor's dtype, shape and offsets, and that
// the tensors tile the data buffer exactly, in order, without gaps or
// overlaps. It does not require weft's metadata, canonical form or checksum:
// every __metadata__ entry is returned in Meta, and Version is 0. Every
// failure wraps ErrCorrupt. The returned tensors' Data share data's memory.
func DecodeSafetensors(data []byte) (*File, error) {
	if len(data) < 8 {
		return nil, corruptf("truncated: %d bytes, shorter than the 8-byte header length field", len(data))
	}
	n := binary.LittleEndian.Uint64(data)
	rest := uint64(len(data) - 8)
	switch {
	case n > MaxHeaderBytes:
		return nil, corruptf("not a safetensors file: its first 8 bytes give a header length of %d, beyond the %d-byte limit", n, MaxHeaderBytes)
	case n > rest:
		return nil, corruptf("truncated: header length %d exceeds the %d bytes after the length field", n, rest)
	case n < 2:
		return nil, corruptf("header length %d is too short for a JSON object", n)
	}
	hdr := data[8 : 8+n]
	buf := data[8+n:]
	if hdr[0] != '{' {
		return nil, corruptf("header does not start with '{'")
	}
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(hdr, &raw); err != nil {
		return nil, corruptf("header is not valid JSON: %v", err)
	}
	f := &File{Meta: map[string]string{}}
	type span struct {
		begin, end uint64
		i          int
	}
	spans := make([]span, 0, len(raw))
	for name, msg := range raw {
		if name == metadataKey {
			var m map[string]string
			if err := json.Unmarshal(msg, &m); err != nil {
				return nil, corruptf("%s must map strings to strings: %v", metadataKey, err)
			}
			for k, v := range m {
				f.Meta[k] = v
			}
			continue
		}
		t, begin, end, err := decodeEntry(name, msg, uint64(len(buf)))
		if err != nil {
			return nil, err
		}
		spans = append(spans, span{begin, end, len(f.Tensors)})
		f.Tensors = append(f.Tensors, t)
	}
	slices.SortFunc(spans, func(a, b span) int {
		if a.begin != b.begin {
			return cmpUint(a.begin, b.begin)
		}
		if a.end != b.end {
			return cmpUint(a.end, b.end)
		}
		return strings.Compare(f.Tensors[a.i].Name, f.Tensors[b.i].Name)
	})
	var next uint64
	for _, s := range spans {
		name := f.Tensors[s.i].Name
		if s.begin > next {
			return nil, corruptf("gap of %d bytes in the data buffer before tensor %q at offset %d", s.begin-next, name, s.begin)
		}
		if s.begin < next {
			return nil, corruptf("tensor %q at data offsets [%d,%d] overlaps the tensor before it", name, s.begin, s.end)
		}
		f.Tensors[s.i].Data = buf[s.begin:s.end:s.end]
		next = s.end
	}
	if next != uint64(len(buf)) {
		return nil, corruptf("the tensors cover %d of the %d data bytes", next, len(buf))
	}
	slices.SortFunc(f.Tensors, func(a, b Tensor) int { return strings.Compare(a.Name, b.Name) })
	return f, nil
}

func cmpUint(a, b uint64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// decodeEntry checks one header entry against a data buffer of bufLen
// bytes and returns the tensor (without data) and its offsets.
func decodeEntry(name string, msg json.RawMessage, bufLen uint64) (Tensor, uint64, uint64, error) {
	var e headerEntry
	dec := json.NewDecoder(bytes.NewReader(msg))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&e); err != nil {
		return Tensor{}, 0, 0, corruptf("tensor %q: bad header entry: %v", name, err)
	}
	dt, ok := ParseDType(e.DType)
	if !ok {
		return Tensor{}, 0, 0, corruptf("tensor %q: unknown dtype %q", name, e.DType)
	}
	if e.Shape == nil {
		return Tensor{}, 0, 0, corruptf("tensor %q: no shape", name)
	}
	if e.DataOffsets == nil || len(*e.DataOffsets) != 2 {
		return Tensor{}, 0, 0, corruptf("tensor %q: data_offsets must be two numbers", name)
	}
	begin, end := (*e.DataOffsets)[0], (*e.DataOffsets)[1]
	if begin > end || end > bufLen {
		return Tensor{}, 0, 0, corruptf("tensor %q: data offsets [%d,%d] outside the %d-byte data buffer", name, begin, end, bufLen)
	}
	shape := make([]int, len(*e.Shape))
	for i, d := range *e.Shape {
		if d < 0 || uint64(d) > math.MaxInt {
			return Tensor{}, 0, 0, corruptf("tensor %q: invalid dimension %d in shape %v", name, d, *e.Shape)
		}
		shape[i] = int(d)
	}
	// The span is at most bufLen, so an element count beyond it is an error
	// found without ever computing an overflowing product.
	n, ok := numElements(shape)
	if !ok || uint64(n) > bufLen/uint64(dt.Size()) || uint64(n)*uint64(dt.Size()) != end-begin {
		return Tensor{}, 0, 0, corruptf("tensor %q: %v %v needs a different size than its %d data bytes", name, dt, *e.Shape, end-begin)
	}
	return Tensor{Name: name, DType: dt, Shape: shape}, begin, end, nil
}
