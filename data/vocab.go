package data

import (
	"context"
	"fmt"
	"io"
	"sort"
	"strconv"
	"strings"
	"unicode/utf8"
)

// Names of the reserved vocabulary entries. They never collide with a
// piece of text: the lookup of pieces skips the reserved ids.
const (
	UnknownPiece  = "<unk>"
	LinePiece     = "<eol>"
	DocumentPiece = "<eod>"
)

// A Vocab maps the pieces of one tokenizer to token ids and back. Id 0 is
// the unknown entry; with a boundary, id 1 is the boundary entry; the other
// ids follow in order of decreasing training count, ties broken by the
// piece's bytes. A Vocab is built from the training split only and is
// immutable: it is safe for concurrent use.
type Vocab struct {
	kind     Kind
	lower    bool
	boundary string // "", "line" or "document"
	pieces   []string
	counts   []int64
	chars    []int32 // runes of the original text per piece
	index    map[string]int32
	runes    map[rune]int32
	table    [256]int32 // char: ids of the ASCII runes; byte: of all bytes; word, symbols: of one-byte pieces
	bpe      *bpeModel
}

// VocabOptions are the settings that build a vocabulary; see Config for
// their meaning and defaults.
type VocabOptions struct {
	Tokenizer     string
	Lowercase     bool
	BPEMerges     int
	MinCount      int
	MaxVocabulary int
	Boundary      string
}

// vocabOptions returns the vocabulary settings of cfg.
func (c Config) vocabOptions() VocabOptions {
	return VocabOptions{Tokenizer: c.Tokenizer, Lowercase: c.Lowercase, BPEMerges: c.BPEMerges,
		MinCount: c.MinCount, MaxVocabulary: c.MaxVocabulary, Boundary: c.Boundary}
}

// Len returns the number of entries, reserved ones included.
func (v *Vocab) Len() int { return len(v.pieces) }

// Kind returns the tokenizer.
func (v *Vocab) Kind() Kind { return v.kind }

// Lowercase reports whether pieces are lower-cased before lookup.
func (v *Vocab) Lowercase() bool { return v.lower }

// Unknown returns the id of the unknown entry (always 0).
func (v *Vocab) Unknown() int { return 0 }

// Boundary returns the id of the boundary entry, or -1 without one.
func (v *Vocab) Boundary() int {
	if v.boundary == "" {
		return -1
	}
	return 1
}

// Piece returns the text of entry id: the piece's bytes (for the byte
// tokenizer a single byte, possibly not UTF-8), or a reserved name such as
// UnknownPiece.
func (v *Vocab) Piece(id int) string { return v.pieces[id] }

// Count returns how often entry id occurred in the training split.
func (v *Vocab) Count(id int) int64 { return v.counts[id] }

// Chars returns the number of characters (runes of the normalized text) a
// token of entry id stands for: the rune count of its piece, 1 for the
// unknown and line entries, 0 for the document entry and for a byte that
// continues a UTF-8 sequence. A Split records the tokens whose text had a
// different length (unknown words, lower-cased letters whose length
// changed).
func (v *Vocab) Chars(id int) int { return int(v.chars[id]) }

// ID returns the id of a piece, and false when the piece has no entry.
func (v *Vocab) ID(piece string) (int, bool) {
	id, ok := v.index[piece]
	return int(id), ok
}

// Merges returns the learned byte-pair merges in the order they apply
// (nil unless the tokenizer is bpe).
func (v *Vocab) Merges() [][2]string {
	if v.bpe == nil {
		return nil
	}
	out := make([][2]string, len(v.bpe.merges))
	copy(out, v.bpe.merges)
	return out
}

// counter counts the pieces of training text, streaming.
type counter struct {
	kind   Kind
	ascii  [256]int64 // char: ASCII runes; byte: every byte
	runes  map[rune]int64
	pieces map[string]int // piece -> index in n
	n      []int64
	sp     *splitter

	// Sampling, for BPE on a large corpus (see BPESampleBytes): piece
	// occurrence k (from 1) is counted when splitmix64(seed^k) < below;
	// below = 0 counts every one.
	below      uint64
	seed       uint64
	seen, kept int64
}

func newCounter(kind Kind, lower bool) *counter {
	c := &counter{kind: kind, runes: map[rune]int64{}, pieces: map[string]int{}}
	c.sp = newSplitter(kind, lower, c.addPiece)
	return c
}

func (c *counter) addPiece(p []byte, _ int) {
	c.seen++
	if c.below != 0 && splitmix64(c.seed^uint64(c.seen)) >= c.below {
		return
	}
	c.kept++
	// The lookup m[string(p)] does not allocate; only a new piece does.
	if i, ok := c.pieces[string(p)]; ok {
		c.n[i]++
		return
	}
	c.pieces[string(p)] = len(c.n)
	c.n = append(c.n, 1)
}

func (c *counter) write(p []byte) {
	switch c.kind {
	case KindChar:
		for i := 0; i < len(p); {
			if b := p[i]; b < utf8.RuneSelf {
				c.ascii[b]++
				i++
				continue
			}
			r, size := utf8.DecodeRune(p[i:])
			c.runes[r]++
			i += size
		}
	case KindByte:
		for _, b := range p {
			c.ascii[b]++
		}
	default:
		c.sp.write(p)
	}
}

// flush ends the current piece (at the end of a file or split).
func (c *counter) flush() { c.sp.flush() }

// counts returns the piece counts.
func (c *counter) counts() map[string]int64 {
	switch c.kind {
	case KindChar:
		m := make(map[string]int64, len(c.runes)+128)
		for b, n := range c.ascii[:utf8.RuneSelf] {
			if n > 0 {
				m[string(rune(b))] = n
			}
		}
		for r, n := range c.runes {
			m[string(r)] += n
		}
		return m
	case KindByte:
		m := make(map[string]int64, 256)
		for b, n := range c.ascii {
			if n > 0 {
				m[string([]byte{byte(b)})] = n
			}
		}
		return m
	}
	m := make(map[string]int64, len(c.pieces))
	for p, i := range c.pieces {
		m[p] = c.n[i]
	}
	return m
}

// LearnVocab reads training text from r (name is used in errors), counts
// its pieces in bounded memory (the counts of distinct pieces), learns the
// byte-pair merges for bpe, and builds the vocabulary.
func LearnVocab(ctx context.Context, r io.Reader, name string, opts VocabOptions) (*Vocab, error) {
	kind, ok := parseKind(opts.Tokenizer)
	if !ok {
		return nil, fmt.Errorf("data.tokenizer must be \"char\", \"byte\", \"word\", \"bpe\" or \"symbols\", got %q", opts.Tokenizer)
	}
	c := newCounter(kind, opts.Lowercase)
	if err := readText(ctx, r, name, false, c.write); err != nil {
		return nil, err
	}
	c.flush()
	return buildVocab(kind, c.counts(), opts), nil
}

// readText streams the normalized text of r to fn.
func readText(ctx context.Context, r io.Reader, name string, replace bool, fn func([]byte)) error {
	n := newNormalizer(r, name, replace)
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		p, err := n.next()
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
		fn(p)
	}
}

// buildVocab makes the vocabulary from piece counts (for bpe, the counts
// of the word pieces, from which it learns the merges first).
func buildVocab(kind Kind, counts map[string]int64, opts VocabOptions) *Vocab {
	v := &Vocab{kind: kind, lower: opts.Lowercase, boundary: opts.Boundary}
	if kind == KindBPE {
		v.bpe = learnBPE(counts, opts.BPEMerges)
		counts = v.bpe.symbolCounts(counts)
	}
	type entry struct {
		piece string
		n     int64
	}
	var bound int64
	entries := make([]entry, 0, len(counts))
	min := int64(opts.MinCount)
	if min < 1 {
		min = 1
	}
	for p, n := range counts {
		if p == "\n" && opts.Boundary == "line" {
			bound += n
			continue
		}
		if n >= min {
			entries = append(entries, entry{p, n})
		}
	}
	sort.Slice(entries, func(i, j int) bool {
		if entries[i].n != entries[j].n {
			return entries[i].n > entries[j].n
		}
		return entries[i].piece < entries[j].piece
	})
	reserved := 1
	if opts.Boundary != "" {
		reserved = 2
	}
	if opts.MaxVocabulary > 0 && len(entries) > opts.MaxVocabulary-reserved {
		entries = entries[:max(opts.MaxVocabulary-reserved, 0)]
	}
	v.add(UnknownPiece, 0, 1)
	switch opts.Boundary {
	case "line":
		v.add(LinePiece, bound, 1)
	case "document":
		v.add(DocumentPiece, 0, 0)
	}
	for _, e := range entries {
		chars := utf8.RuneCountInString(e.piece)
		if kind == KindByte {
			chars = byteChars(e.piece[0])
		}
		v.add(e.piece, e.n, chars)
	}
	v.index = v.makeIndex()
	return v
}

func (v *Vocab) add(piece string, n int64, chars int) {
	v.pieces = append(v.pieces, piece)
	v.counts = append(v.counts, n)
	v.chars = append(v.chars, int32(chars))
}

// makeIndex builds the lookup tables from the entries.
func (v *Vocab) makeIndex() map[string]int32 {
	reserved := 1
	if v.boundary != "" {
		reserved = 2
	}
	index := make(map[string]int32, len(v.pieces))
	for id := reserved; id < len(v.pieces); id++ {
		index[v.pieces[id]] = int32(id)
	}
	if v.boundary == "line" {
		index["\n"] = 1
	}
	v.runes = map[rune]int32{}
	for i := range v.table {
		v.table[i] = 0
	}
	switch v.kind {
	case KindChar:
		for p, id := range index {
			r, _ := utf8.DecodeRuneInString(p)
			if r < utf8.RuneSelf {
				v.table[r] = id
			} else {
				v.runes[r] = id
			}
		}
	case KindByte:
		for p, id := range index {
			v.table[p[0]] = id
		}
	case KindWord, KindSymbols:
		// One-byte pieces (spaces, punctuation, "\n") skip the map.
		for p, id := range index {
			if len(p) == 1 {
				v.table[p[0]] = id
			}
		}
	case KindBPE:
		v.bpe.link(index)
	}
	return index
}

// lookup returns the id of a piece, or the unknown id.
func (v *Vocab) lookup(p []byte) int {
	if len(p) == 1 && v.kind != KindBPE {
		return int(v.table[p[0]])
	}
	if id, ok := v.index[string(p)]; ok {
		return int(id)
	}
	return 0
}

// encoder turns streamed normalized text into token ids.
type encoder struct {
	v     *Vocab
	emit  func(id, chars int)
	sp    *splitter
	buf   []int32
	cache map[string][]int32 // bpe: ids of recent pieces, at most bpeCacheSize
}

// bpeCacheSize bounds the pieces whose bpe encoding an encoder remembers.
const bpeCacheSize = 1 << 15

func (v *Vocab) newEncoder(emit func(id, chars int)) *encoder {
	e := &encoder{v: v, emit: emit}
	e.sp = newSplitter(v.kind, v.lower, e.piece)
	return e
}

func (e *encoder) piece(p []byte, chars int) {
	if e.v.kind != KindBPE {
		e.emit(e.v.lookup(p), chars)
		return
	}
	ids, ok := e.cache[string(p)]
	if !ok {
		if e.cache == nil || len(e.cache) >= bpeCacheSize {
			e.cache = make(map[string][]int32)
		}
		e.buf = e.v.bpe.encode(e.buf[:0], p)
		ids = append([]int32(nil), e.buf...)
		e.cache[string(p)] = ids
	}
	last := len(ids) - 1
	for _, id := range ids[:last] {
		n := int(e.v.chars[id])
		chars -= n
		e.emit(int(id), n)
	}
	// The last token takes what is left: lower-casing may have changed the
	// rune count, and the text's count is what the split must sum to.
	e.emit(int(ids[last]), chars)
}

func (e *encoder) write(p []byte) {
	v := e.v
	switch v.kind {
	case KindChar:
		for i := 0; i < len(p); {
			if b := p[i]; b < utf8.RuneSelf {
				e.emit(int(v.table[b]), 1)
				i++
				continue
			}
			r, size := utf8.DecodeRune(p[i:])
			e.emit(int(v.runes[r]), 1)
			i += size
		}
	case KindByte:
		for _, b := range p {
			e.emit(int(v.table[b]), byteChars(b))
		}
	default:
		e.sp.write(p)
	}
}

func (e *encoder) flush() { e.sp.flush() }

// Encode appends the ids of text, which must be normalized (valid UTF-8,
// "\n" line ends), to dst.
func (v *Vocab) Encode(dst []int, text string) []int {
	e := v.newEncoder(func(id, _ int) { dst = append(dst, id) })
	e.write([]byte(text))
	e.flush()
	return dst
}

// EncodeReader streams the text of r (name is used in errors) through the
// normalizer and the tokenizer, calling emit for each token with its id and
// the number of characters of the text it covers. Memory stays bounded
// whatever the size of r (except for a single piece longer than memory).
func (v *Vocab) EncodeReader(ctx context.Context, r io.Reader, name string, emit func(id, chars int)) error {
	return v.EncodeReaderText(ctx, r, name, nil, emit)
}

// EncodeReaderText is EncodeReader that also passes each chunk of the
// normalized text to text (when not nil) before tokenizing it, so that a
// caller can keep the text its tokens came from: the tokens of a chunk are
// emitted after the chunk, some of them only after a later chunk.
func (v *Vocab) EncodeReaderText(ctx context.Context, r io.Reader, name string, text func(p []byte), emit func(id, chars int)) error {
	e := v.newEncoder(emit)
	write := e.write
	if text != nil {
		write = func(p []byte) {
			text(p)
			e.write(p)
		}
	}
	if err := readText(ctx, r, name, false, write); err != nil {
		return err
	}
	e.flush()
	return nil
}

// TokenText is the text token id adds to a decoded sequence after token
// prev (-1 for none): the token's own text, except for symbols, whose
// separating space depends on what comes before.
func (v *Vocab) TokenText(prev, id int) string {
	if v.Kind() == KindSymbols && prev >= 0 {
		p := v.Decode([]int{prev})
		return v.Decode([]int{prev, id})[len(p):]
	}
	return v.Decode([]int{id})
}

// Decode returns the text of ids: the pieces joined (for symbols, with one
// space between the symbols of a line), the unknown entry as U+FFFD, the
// line entry as "\n", the document entry as nothing.
func (v *Vocab) Decode(ids []int) string { return string(v.AppendDecode(nil, ids)) }

// AppendDecode appends the text of ids to dst; see Decode.
func (v *Vocab) AppendDecode(dst []byte, ids []int) []byte {
	prevSymbol := false
	for _, id := range ids {
		var p string
		switch {
		case id == 0:
			p = "\uFFFD"
		case id == 1 && v.boundary == "line":
			p = "\n"
		case id == 1 && v.boundary == "document":
			p = ""
		default:
			p = v.pieces[id]
		}
		if v.kind == KindSymbols {
			if p == "\n" || p == "" {
				prevSymbol = false
			} else {
				if prevSymbol {
					dst = append(dst, ' ')
				}
				prevSymbol = true
			}
		}
		dst = append(dst, p...)
	}
	return dst
}

// UnknownPiecesError lists the pieces of a text that are outside a
// vocabulary, each once, in order of appearance.
type UnknownPiecesError struct {
	What   string // the text's name, e.g. "prompt"
	Kind   string // what a piece is: "character", "word" or "symbol"
	Pieces []string
}

func (e *UnknownPiecesError) Error() string {
	what := e.Kind
	if len(e.Pieces) > 1 {
		what += "s"
	}
	list := make([]string, 0, min(len(e.Pieces), 10))
	for _, u := range e.Pieces[:min(len(e.Pieces), 10)] {
		list = append(list, strconv.Quote(u))
	}
	more := ""
	if len(e.Pieces) > 10 {
		more = fmt.Sprintf(" and %d more", len(e.Pieces)-10)
	}
	return fmt.Sprintf("%s has %d %s outside the model's vocabulary: %s%s", e.What, len(e.Pieces), what, strings.Join(list, ", "), more)
}

// EncodeKnown encodes text, named what in errors. With mapUnknown, pieces
// outside the vocabulary become the unknown entry; without it they are an
// *UnknownPiecesError listing them.
func (v *Vocab) EncodeKnown(ctx context.Context, text, what string, mapUnknown bool) ([]int, error) {
	var ids []int
	var unknown []string
	seen := map[string]bool{}
	runes := []rune(text)
	pos := 0
	err := v.EncodeReader(ctx, strings.NewReader(text), what, func(id, chars int) {
		if id == v.Unknown() {
			end := min(pos+max(chars, 1), len(runes))
			if p := string(runes[min(pos, end):end]); !seen[p] {
				seen[p] = true
				unknown = append(unknown, p)
			}
		}
		pos += chars
		ids = append(ids, id)
	})
	if err != nil {
		return nil, err
	}
	if len(unknown) > 0 && !mapUnknown {
		kind := "character"
		switch v.Kind() {
		case KindWord, KindBPE:
			kind = "word"
		case KindSymbols:
			kind = "symbol"
		}
		return nil, &UnknownPiecesError{What: what, Kind: kind, Pieces: unknown}
	}
	return ids, nil
}
