package data

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io/fs"
	"os"
	"path/filepath"
	"weft/data/atomicfile"
)

// TokenCacheFile is the name of the encoded cache in the cache folder.
const TokenCacheFile = "tokens.bin"

// Cache format constants; see the byte layout in the package documentation.
const (
	cacheMagic   = "WEFTTOKS"
	cacheVersion = 1
	cacheFixed   = 8 + 4 + 32 + 4 + 8 // magic, version, key, id width, metadata length
)

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

func cachePath(dir string) string { return filepath.Join(dir, TokenCacheFile) }

// cacheKey is the SHA-256 of the cache format version, every setting of
// cfg but the file list, and for each source its absolute path, size and
// modification time (standard input: the SHA-256 of its bytes).
func cacheKey(cfg Config, srcs []source, stdinSum []byte) [32]byte {
	type keySource struct {
		Path   string
		Size   int64
		MTime  int64
		SHA256 []byte `json:",omitempty"`
	}
	k := struct {
		Version int
		Config  Config
		Sources []keySource
	}{Version: cacheVersion, Config: cfg}
	k.Config.Files = nil
	for _, s := range srcs {
		if s.display == "-" {
			k.Sources = append(k.Sources, keySource{Path: "-", Size: s.Size, SHA256: stdinSum})
			continue
		}
		abs, err := filepath.Abs(s.Path)
		if err != nil {
			abs = s.Path
		}
		k.Sources = append(k.Sources, keySource{Path: abs, Size: s.Size, MTime: s.MTime})
	}
	b, err := json.Marshal(k)
	if err != nil {
		panic("data: cache key: " + err.Error()) // plain data, cannot fail
	}
	return sha256.Sum256(b)
}

// cacheMeta is the JSON metadata block of the cache.
type cacheMeta struct {
	Vocab  *Vocab       `json:"vocab"`
	Input  InputStats   `json:"input"`
	Report Report       `json:"report"`
	Splits [3]splitMeta `json:"splits"`
}

type splitMeta struct {
	Characters int64 `json:"characters"`
	Lines      int64 `json:"lines"`
	OOV        int64 `json:"oov"`
	Offset     int64 `json:"offset"`
}

// encodeCache serializes ds in the cache format.
func encodeCache(key [32]byte, ds *Dataset) ([]byte, error) {
	meta := cacheMeta{Vocab: ds.Vocab, Input: ds.Input, Report: ds.Report}
	for i, s := range ds.Splits() {
		meta.Splits[i] = splitMeta{s.Characters, s.Lines, s.OOV, s.Offset}
	}
	mb, err := json.Marshal(meta)
	if err != nil {
		return nil, err
	}
	width := 2
	if ds.Vocab.Len() > 1<<16 {
		width = 4
	}
	size := cacheFixed + len(mb) + 4
	for _, s := range ds.Splits() {
		size += 16 + width*len(s.Tokens) + 12*len(s.odd)
	}
	b := make([]byte, 0, size)
	b = append(b, cacheMagic...)
	b = binary.LittleEndian.AppendUint32(b, cacheVersion)
	b = append(b, key[:]...)
	b = binary.LittleEndian.AppendUint32(b, uint32(width))
	b = binary.LittleEndian.AppendUint64(b, uint64(len(mb)))
	b = append(b, mb...)
	for _, s := range ds.Splits() {
		b = binary.LittleEndian.AppendUint64(b, uint64(len(s.Tokens)))
		for _, id := range s.Tokens {
			if width == 2 {
				b = binary.LittleEndian.AppendUint16(b, uint16(id))
			} else {
				b = binary.LittleEndian.AppendUint32(b, uint32(id))
			}
		}
		b = binary.LittleEndian.AppendUint64(b, uint64(len(s.odd)))
		for _, o := range s.odd {
			b = binary.LittleEndian.AppendUint64(b, uint64(o.Pos))
			b = binary.LittleEndian.AppendUint32(b, uint32(o.Chars))
		}
	}
	return binary.LittleEndian.AppendUint32(b, crc32.Checksum(b, castagnoli)), nil
}

func writeCache(path string, key [32]byte, ds *Dataset) error {
	b, err := encodeCache(key, ds)
	if err != nil {
		return fmt.Errorf("token cache %q: %w", path, err)
	}
	if err := atomicfile.WriteBytes(path, b); err != nil {
		return fmt.Errorf("token cache %q: %w", path, err)
	}
	return nil
}

// errStale is a cache made for other inputs or settings.
var errStale = errors.New("stale")

// readCache loads the cache at path. A missing or stale cache gives an
// error that is not ErrCorrupt; damaged bytes give one wrapping ErrCorrupt.
func readCache(path string, key [32]byte) (*Dataset, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, err
		}
		return nil, fmt.Errorf("token cache %q: %w: %v", path, ErrCorrupt, err)
	}
	ds, gotKey, err := decodeCache(b)
	if err != nil {
		return nil, fmt.Errorf("token cache %q: %w", path, err)
	}
	if gotKey != key {
		return nil, errStale
	}
	return ds, nil
}

// decodeCache checks and parses cache bytes; every failure wraps ErrCorrupt.
func decodeCache(b []byte) (*Dataset, [32]byte, error) {
	var key [32]byte
	bad := func(format string, args ...any) (*Dataset, [32]byte, error) {
		return nil, key, fmt.Errorf("%w: %s", ErrCorrupt, fmt.Sprintf(format, args...))
	}
	if len(b) < cacheFixed+4 {
		return bad("%d bytes, shorter than the header", len(b))
	}
	body, sum := b[:len(b)-4], binary.LittleEndian.Uint32(b[len(b)-4:])
	if crc32.Checksum(body, castagnoli) != sum {
		return bad("checksum mismatch")
	}
	if string(body[:8]) != cacheMagic {
		return bad("not a token cache (magic %q)", body[:8])
	}
	if v := binary.LittleEndian.Uint32(body[8:]); v != cacheVersion {
		return bad("format version %d, want %d", v, cacheVersion)
	}
	copy(key[:], body[12:44])
	width := int(binary.LittleEndian.Uint32(body[44:]))
	if width != 2 && width != 4 {
		return bad("token width %d", width)
	}
	mlen := binary.LittleEndian.Uint64(body[48:])
	rest := body[cacheFixed:]
	if mlen > uint64(len(rest)) {
		return bad("metadata length %d past the end", mlen)
	}
	var meta cacheMeta
	if err := json.Unmarshal(rest[:mlen], &meta); err != nil || meta.Vocab == nil {
		return bad("metadata: %v", err)
	}
	rest = rest[mlen:]
	v := meta.Vocab
	ds := &Dataset{Vocab: v, Input: meta.Input, Report: meta.Report}
	var splits [3]*Split
	for i, name := range []string{SplitTrain, SplitValidation, SplitTest} {
		m := meta.Splits[i]
		s := &Split{Name: name, vocab: v, Characters: m.Characters, Lines: m.Lines, OOV: m.OOV, Offset: m.Offset}
		if len(rest) < 8 {
			return bad("%s split truncated", name)
		}
		n := binary.LittleEndian.Uint64(rest)
		rest = rest[8:]
		if n > uint64(len(rest)/width) {
			return bad("%s split: %d tokens past the end", name, n)
		}
		s.Tokens = make([]int, n)
		for j := range s.Tokens {
			var id int
			if width == 2 {
				id = int(binary.LittleEndian.Uint16(rest[j*2:]))
			} else {
				id = int(binary.LittleEndian.Uint32(rest[j*4:]))
			}
			if id >= v.Len() {
				return bad("%s split: token %d has id %d outside the vocabulary of %d", name, j, id, v.Len())
			}
			s.Tokens[j] = id
		}
		rest = rest[int(n)*width:]
		if len(rest) < 8 {
			return bad("%s split truncated", name)
		}
		k := binary.LittleEndian.Uint64(rest)
		rest = rest[8:]
		if k > uint64(len(rest)/12) {
			return bad("%s split: %d character records past the end", name, k)
		}
		s.odd = make([]oddChars, k)
		for j := range s.odd {
			pos := binary.LittleEndian.Uint64(rest[j*12:])
			if pos >= n {
				return bad("%s split: character record at token %d of %d", name, pos, n)
			}
			s.odd[j] = oddChars{int64(pos), int32(binary.LittleEndian.Uint32(rest[j*12+8:]))}
		}
		rest = rest[k*12:]
		splits[i] = s
	}
	if len(rest) != 0 {
		return bad("%d trailing bytes", len(rest))
	}
	ds.Train, ds.Validation, ds.Test = splits[0], splits[1], splits[2]
	return ds, key, nil
}
