package demo

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"

	"weft/data"
	"weft/data/atomicfile"
)

// MarksExt ends the name of the marks file beside a corpus file: the
// corpus's name and this.
const MarksExt = ".marks.json"

// marksHeader is the marks file's format and the version this weft writes.
var marksHeader = data.FileHeader{Format: "weft-marks", Version: 1}

// marksFile lists the character offsets of a corpus file that only
// long-range context predicts.
type marksFile struct {
	data.FileHeader       // "weft-marks", 1
	Offsets         []int `json:"offsets"` // character (code point) offsets, increasing
}

// WriteFiles generates the corpus of seed and size into path and its marks
// file beside it (path+MarksExt), leaving a file that already holds the
// same bytes untouched, so that a token cache and a resumed run stay
// valid. It returns the number of marked positions.
func WriteFiles(path string, seed uint64, size int) (int, error) {
	var buf bytes.Buffer
	marks, err := Generate(&buf, seed, size)
	if err != nil {
		return 0, err
	}
	offsets := marks.Offsets(0)
	mb, err := json.Marshal(marksFile{FileHeader: marksHeader, Offsets: offsets})
	if err != nil {
		return 0, err
	}
	for _, f := range []struct {
		path string
		b    []byte
	}{{path, buf.Bytes()}, {path + MarksExt, mb}} {
		if old, err := os.ReadFile(f.path); err == nil && bytes.Equal(old, f.b) {
			continue
		}
		if err := atomicfile.WriteBytes(f.path, f.b); err != nil {
			return 0, fmt.Errorf("write %s: %w", f.path, err)
		}
	}
	return len(offsets), nil
}

// SplitMarks returns, for each token of split sp of a corpus read from the
// one file corpus, whether it is at a marked position (its first character
// is), when a marks file lies beside corpus; nil when there is none or when
// the split keeps no positions (a hash split).
func SplitMarks(corpus string, sp *data.Split) ([]bool, error) {
	mb, err := os.ReadFile(corpus + MarksExt)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	var mf marksFile
	if err := json.Unmarshal(mb, &mf); err != nil {
		return nil, fmt.Errorf("%s%s: not a marks file: %w", corpus, MarksExt, err)
	}
	if err := mf.Check(corpus+MarksExt, marksHeader, false); err != nil {
		return nil, err
	}
	offsets, err := sp.TokenOffsets(nil)
	if err != nil {
		return nil, nil // a hash split: positions are not kept
	}
	marked := make(map[int64]bool, len(mf.Offsets))
	for _, o := range mf.Offsets {
		marked[int64(o)] = true
	}
	mask := make([]bool, len(offsets))
	for i, o := range offsets {
		mask[i] = marked[o]
	}
	return mask, nil
}
