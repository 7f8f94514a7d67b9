package data

import (
	"bufio"
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
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

// cacheWidth is the bytes of one token id in the cache: 2 up to 65,536
// vocabulary entries, 4 above.
func cacheWidth(vocab int) int {
	if vocab > 1<<16 {
		return 4
	}
	return 2
}

// crcWriter passes writes on and keeps the running CRC-32C of them.
type crcWriter struct {
	w   io.Writer
	crc uint32
}

func (c *crcWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.crc = crc32.Update(c.crc, castagnoli, p[:n])
	return n, err
}

// writeCacheTo writes ds in the cache format to w, streaming: the token
// ids of each split come from its Tokens window by window, and the
// checksum is taken as the bytes go out.
func writeCacheTo(w io.Writer, key [32]byte, ds *Dataset) error {
	meta := cacheMeta{Vocab: ds.Vocab, Input: ds.Input, Report: ds.Report}
	for i, s := range ds.Splits() {
		meta.Splits[i] = splitMeta{s.Characters, s.Lines, s.OOV, s.Offset}
	}
	mb, err := json.Marshal(meta)
	if err != nil {
		return err
	}
	width := cacheWidth(ds.Vocab.Len())
	cw := &crcWriter{w: w}
	out := bufio.NewWriterSize(cw, 1<<20)
	b := make([]byte, 0, cacheFixed)
	b = append(b, cacheMagic...)
	b = binary.LittleEndian.AppendUint32(b, cacheVersion)
	b = append(b, key[:]...)
	b = binary.LittleEndian.AppendUint32(b, uint32(width))
	b = binary.LittleEndian.AppendUint64(b, uint64(len(mb)))
	out.Write(b)
	out.Write(mb)
	var num [12]byte
	pack := make([]byte, 0, width*tokenReadChunk)
	for _, s := range ds.Splits() {
		out.Write(binary.LittleEndian.AppendUint64(num[:0], uint64(s.Tokens.Len())))
		s.Tokens.Each(tokenReadChunk, func(_ int, ids []int) error {
			pack = pack[:0]
			for _, id := range ids {
				pack = appendID(pack, id, width)
			}
			out.Write(pack)
			return nil
		})
		out.Write(binary.LittleEndian.AppendUint64(num[:0], uint64(len(s.odd))))
		for _, o := range s.odd {
			r := binary.LittleEndian.AppendUint64(num[:0], uint64(o.Pos))
			out.Write(binary.LittleEndian.AppendUint32(r, uint32(o.Chars)))
		}
	}
	// The writer keeps its first error; Flush returns it.
	if err := out.Flush(); err != nil {
		return err
	}
	_, err = w.Write(binary.LittleEndian.AppendUint32(num[:0], cw.crc))
	return err
}

// encodeCache serializes ds in the cache format, in memory.
func encodeCache(key [32]byte, ds *Dataset) ([]byte, error) {
	var buf bytes.Buffer
	if err := writeCacheTo(&buf, key, ds); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

func writeCache(path string, key [32]byte, ds *Dataset) error {
	err := atomicfile.Write(path, func(w io.Writer) error { return writeCacheTo(w, key, ds) })
	if err != nil {
		return fmt.Errorf("token cache %q: %w", path, err)
	}
	return nil
}

// errStale is a cache made for other inputs or settings.
var errStale = errors.New("stale")

// readCache opens the cache at path: it checks every byte (the checksum,
// the layout, each id against the vocabulary) in one streaming pass, then
// maps the file so that the splits' Tokens view it. A missing or stale
// cache gives an error that is not ErrCorrupt; damaged bytes give one
// wrapping ErrCorrupt.
func readCache(path string, key [32]byte) (*Dataset, error) {
	f, err := os.Open(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, err
		}
		return nil, fmt.Errorf("token cache %q: %w: %v", path, ErrCorrupt, err)
	}
	ds, gotKey, err := mapCache(f, path, true)
	if err != nil {
		return nil, err
	}
	if gotKey != key {
		ds.Close()
		return nil, errStale
	}
	return ds, nil
}

// mapCache checks the cache file open in f in one streaming pass (each id
// against the vocabulary too when checkIDs), then maps it so that the
// splits' Tokens view it, and returns the key it holds. On error it closes
// f; every error names path.
func mapCache(f *os.File, path string, checkIDs bool) (*Dataset, [32]byte, error) {
	ds, key, lay, err := scanCache(bufio.NewReaderSize(f, 1<<20), checkIDs)
	if err == nil {
		err = lay.attach(ds, f, path)
	}
	if err != nil {
		f.Close()
		return nil, key, fmt.Errorf("token cache %q: %w", path, err)
	}
	return ds, key, nil
}

// cacheLayout is where each split's packed ids lie in a cache file.
type cacheLayout struct {
	width int
	size  int64    // bytes of the whole file
	at    [3]int64 // offset of each split's first id
	n     [3]int   // ids of each split
}

// countingReader counts and checksums the bytes read through it.
type countingReader struct {
	r   io.Reader
	n   int64
	crc uint32
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	c.crc = crc32.Update(c.crc, castagnoli, p[:n])
	return n, err
}

// scanCache reads cache bytes from r in one pass and checks them: the
// layout, each id against the vocabulary (when checkIDs) and the
// checksum. It returns the dataset without its splits' Tokens, the key
// and where the ids lie. Every failure wraps ErrCorrupt.
func scanCache(r io.Reader, checkIDs bool) (*Dataset, [32]byte, cacheLayout, error) {
	var key [32]byte
	var lay cacheLayout
	bad := func(format string, args ...any) (*Dataset, [32]byte, cacheLayout, error) {
		return nil, key, lay, fmt.Errorf("%w: %s", ErrCorrupt, fmt.Sprintf(format, args...))
	}
	cr := &countingReader{r: r}
	full := func(p []byte) bool {
		_, err := io.ReadFull(cr, p)
		return err == nil
	}
	head := make([]byte, cacheFixed)
	if !full(head) {
		return bad("%d bytes, shorter than the header", cr.n)
	}
	if string(head[:8]) != cacheMagic {
		return bad("not a token cache (magic %q)", head[:8])
	}
	if v := binary.LittleEndian.Uint32(head[8:]); v != cacheVersion {
		return bad("format version %d, want %d", v, cacheVersion)
	}
	copy(key[:], head[12:44])
	width := int(binary.LittleEndian.Uint32(head[44:]))
	if width != 2 && width != 4 {
		return bad("token width %d", width)
	}
	lay.width = width
	mlen := binary.LittleEndian.Uint64(head[48:])
	if mlen > 1<<30 {
		return bad("metadata length %d", mlen)
	}
	mb := make([]byte, mlen)
	if !full(mb) {
		return bad("metadata length %d past the end", mlen)
	}
	var meta cacheMeta
	if err := json.Unmarshal(mb, &meta); err != nil || meta.Vocab == nil {
		return bad("metadata: %v", err)
	}
	v := meta.Vocab
	ds := &Dataset{Vocab: v, Input: meta.Input, Report: meta.Report}
	var splits [3]*Split
	var num [12]byte
	buf := make([]byte, width*tokenReadChunk)
	ids := make([]int, tokenReadChunk)
	for i, name := range []string{SplitTrain, SplitValidation, SplitTest} {
		m := meta.Splits[i]
		s := &Split{Name: name, vocab: v, Characters: m.Characters, Lines: m.Lines, OOV: m.OOV, Offset: m.Offset}
		if !full(num[:8]) {
			return bad("%s split truncated", name)
		}
		n := binary.LittleEndian.Uint64(num[:])
		if n > 1<<48 {
			return bad("%s split: %d tokens past the end", name, n)
		}
		lay.at[i], lay.n[i] = cr.n, int(n)
		for j := uint64(0); j < n; {
			k := min(n-j, tokenReadChunk)
			p := buf[:int(k)*width]
			if !full(p) {
				return bad("%s split: %d tokens past the end", name, n)
			}
			if checkIDs {
				decodeIDs(ids[:k], p, width)
				for q, id := range ids[:k] {
					if id >= v.Len() {
						return bad("%s split: token %d has id %d outside the vocabulary of %d", name, j+uint64(q), id, v.Len())
					}
				}
			}
			j += k
		}
		if !full(num[:8]) {
			return bad("%s split truncated", name)
		}
		k := binary.LittleEndian.Uint64(num[:])
		if k > n {
			return bad("%s split: %d character records past the end", name, k)
		}
		s.odd = make([]oddChars, 0, min(k, 1<<20))
		for j := uint64(0); j < k; j++ {
			if !full(num[:12]) {
				return bad("%s split: %d character records past the end", name, k)
			}
			pos := binary.LittleEndian.Uint64(num[:])
			if pos >= n || (j > 0 && int64(pos) <= s.odd[j-1].Pos) {
				return bad("%s split: character record at token %d of %d", name, pos, n)
			}
			s.odd = append(s.odd, oddChars{int64(pos), int32(binary.LittleEndian.Uint32(num[8:]))})
		}
		splits[i] = s
	}
	sum := cr.crc
	if !full(num[:4]) {
		return bad("checksum missing")
	}
	if binary.LittleEndian.Uint32(num[:]) != sum {
		return bad("checksum mismatch")
	}
	var one [1]byte
	if k, _ := io.ReadFull(cr, one[:]); k != 0 {
		return bad("trailing bytes")
	}
	lay.size = cr.n
	ds.Train, ds.Validation, ds.Test = splits[0], splits[1], splits[2]
	return ds, key, lay, nil
}

// decodeCache checks and parses cache bytes held in memory; the splits'
// Tokens view b. Every failure wraps ErrCorrupt.
func decodeCache(b []byte) (*Dataset, [32]byte, error) {
	ds, key, lay, err := scanCache(bytes.NewReader(b), true)
	if err != nil {
		return nil, key, err
	}
	for i, s := range ds.Splits() {
		s.Tokens = packedTokens(b[lay.at[i]:], lay.width, lay.n[i])
	}
	return ds, key, nil
}
