package data

import (
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"unicode/utf8"
	"weft/data/atomicfile"
)

// VocabFile is the name of the vocabulary file in a run directory.
const VocabFile = "vocab.json"

// Vocabulary file format identifiers.
const (
	vocabFormat  = "weft-vocabulary"
	vocabVersion = 1
)

// vocabJSON is the vocabulary file: a JSON object
//
//	{"format": "weft-vocabulary", "version": 1,
//	 "tokenizer": "word", "lowercase": false, "boundary": "line",
//	 "entries": [{"piece": "<unk>", "count": 0}, {"piece": "<eol>", "count": 9}, ...],
//	 "bpe_alphabet": [...], "bpe_merges": [["t", "h"], ...]}
//
// The position in entries is the token id. For the byte tokenizer a piece
// is written as two lowercase hex digits ("0a"). bpe_alphabet and
// bpe_merges are present for bpe only.
type vocabJSON struct {
	Format    string       `json:"format"`
	Version   int          `json:"version"`
	Tokenizer string       `json:"tokenizer"`
	Lowercase bool         `json:"lowercase"`
	Boundary  string       `json:"boundary"`
	Entries   []vocabEntry `json:"entries"`
	Alphabet  []string     `json:"bpe_alphabet,omitempty"`
	Merges    [][2]string  `json:"bpe_merges,omitempty"`
}

type vocabEntry struct {
	Piece string `json:"piece"`
	Count int64  `json:"count"`
}

// MarshalJSON encodes the vocabulary in the file format above.
func (v *Vocab) MarshalJSON() ([]byte, error) {
	f := vocabJSON{Format: vocabFormat, Version: vocabVersion, Tokenizer: v.kind.String(),
		Lowercase: v.lower, Boundary: v.boundary}
	for id, p := range v.pieces {
		if v.kind == KindByte && id >= v.reserved() {
			p = hex.EncodeToString([]byte(p))
		}
		f.Entries = append(f.Entries, vocabEntry{Piece: p, Count: v.counts[id]})
	}
	if v.bpe != nil {
		f.Alphabet = v.bpe.alphabet
		f.Merges = v.bpe.merges
		if f.Merges == nil {
			f.Merges = [][2]string{}
		}
	}
	return json.Marshal(f)
}

func (v *Vocab) reserved() int {
	if v.boundary != "" {
		return 2
	}
	return 1
}

// UnmarshalJSON decodes and checks a vocabulary; a malformed one gives an
// error wrapping ErrCorrupt.
func (v *Vocab) UnmarshalJSON(b []byte) error {
	var f vocabJSON
	if err := json.Unmarshal(b, &f); err != nil {
		return fmt.Errorf("%w: %v", ErrCorrupt, err)
	}
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s", ErrCorrupt, fmt.Sprintf(format, args...))
	}
	if f.Format != vocabFormat {
		return bad("format %q, want %q", f.Format, vocabFormat)
	}
	if f.Version != vocabVersion {
		return bad("version %d, want %d", f.Version, vocabVersion)
	}
	kind, ok := parseKind(f.Tokenizer)
	if !ok {
		return bad("unknown tokenizer %q", f.Tokenizer)
	}
	nv := Vocab{kind: kind, lower: f.Lowercase, boundary: f.Boundary}
	want := []string{UnknownPiece}
	switch f.Boundary {
	case "":
	case "line":
		want = append(want, LinePiece)
	case "document":
		want = append(want, DocumentPiece)
	default:
		return bad("unknown boundary %q", f.Boundary)
	}
	if len(f.Entries) < len(want) {
		return bad("%d entries, want at least %d", len(f.Entries), len(want))
	}
	seen := map[string]bool{}
	for id, e := range f.Entries {
		p := e.Piece
		chars := utf8.RuneCountInString(p)
		switch {
		case id < len(want):
			if p != want[id] {
				return bad("entry %d is %q, want %q", id, p, want[id])
			}
			chars = 1
			if p == DocumentPiece {
				chars = 0
			}
		case kind == KindByte:
			raw, err := hex.DecodeString(p)
			if err != nil || len(raw) != 1 {
				return bad("entry %d: byte piece %q is not two hex digits", id, p)
			}
			p = string(raw)
			chars = byteChars(raw[0])
		case p == "" || !utf8.ValidString(p):
			return bad("entry %d: empty or not UTF-8", id)
		case kind == KindChar && chars != 1:
			return bad("entry %d: char piece %q is not one character", id, p)
		}
		if id >= len(want) {
			if seen[p] {
				return bad("entry %d: piece %q repeated", id, e.Piece)
			}
			seen[p] = true
		}
		if e.Count < 0 {
			return bad("entry %d: negative count", id)
		}
		nv.add(p, e.Count, chars)
	}
	if kind == KindBPE {
		m, err := newBPEModel(f.Alphabet, f.Merges)
		if err != nil {
			return bad("%v", err)
		}
		nv.bpe = m
	} else if f.Alphabet != nil || f.Merges != nil {
		return bad("bpe merges given for tokenizer %q", f.Tokenizer)
	}
	nv.index = nv.makeIndex()
	*v = nv
	return nil
}

// WriteFile saves the vocabulary at path atomically (atomicfile.WriteBytes).
func (v *Vocab) WriteFile(path string) error {
	if err := atomicfile.WriteJSON(path, v, " "); err != nil {
		return fmt.Errorf("write vocabulary %q: %w", path, err)
	}
	return nil
}

// ReadVocabFile loads a vocabulary saved by WriteFile.
func ReadVocabFile(path string) (*Vocab, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read vocabulary: %w", err)
	}
	v := new(Vocab)
	if err := v.UnmarshalJSON(b); err != nil {
		return nil, fmt.Errorf("read vocabulary %q: %w", path, err)
	}
	return v, nil
}
