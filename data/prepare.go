package data

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"unicode"
	"unicode/utf8"
)

// Report is the split report of a prepared corpus, as `weft prepare --json`
// prints it.
type Report struct {
	Train           SplitReport `json:"train"`
	Validation      SplitReport `json:"validation"`
	Test            SplitReport `json:"test"`
	VocabularySize  int         `json:"vocabulary_size"`
	LeakedTestLines int64       `json:"leaked_test_lines"`

	// BPESample, when not nil, says that the BPE merges were learned on a
	// sample of the training pieces (see BPESampleBytes).
	BPESample *BPESample `json:"bpe_sample,omitempty"`
}

// BPESampleBytes is the corpus size above which the "bpe" tokenizer learns
// its merges on a sample of the training text: each piece occurrence (a
// word or a run of punctuation, as the tokenizer splits the text before
// merging) is counted with probability BPESampleBytes divided by the
// corpus's bytes, drawn from a hash (splitmix64) of data.split_seed and the
// occurrence's number, so that about BPESampleBytes of text is counted
// whatever the corpus's size and the same corpus always gives the same
// sample. The whole training split is still encoded with the merges.
const BPESampleBytes = 64 << 20

// bpeSampleBytes is BPESampleBytes; tests lower it.
var bpeSampleBytes int64 = BPESampleBytes

// BPESample describes the sample BPE merges were learned on.
type BPESample struct {
	Pieces int64  `json:"pieces"` // piece occurrences counted
	Of     int64  `json:"of"`     // piece occurrences in the training split
	Seed   uint64 `json:"seed"`   // data.split_seed
}

// SplitReport gives the sizes of one split.
type SplitReport struct {
	Characters int64   `json:"characters"`
	Tokens     int64   `json:"tokens"`
	Lines      int64   `json:"lines"`
	OOVRate    float64 `json:"oov_rate"`
}

// InputStats counts what reading the corpus found and changed.
type InputStats struct {
	Files    int   `json:"files"`
	Bytes    int64 `json:"bytes"`    // raw bytes read
	CRLF     int64 `json:"crlf"`     // CRLF pairs normalised to "\n"
	Replaced int64 `json:"replaced"` // invalid bytes replaced by U+FFFD
	BOM      int   `json:"bom"`      // byte-order marks stripped
}

// CacheInfo says what happened to the encoded cache.
type CacheInfo struct {
	Path    string // the cache file, "" when caching is off
	Hit     bool   // the dataset was loaded from the cache
	Damaged error  // why an existing cache was not trusted (wraps ErrCorrupt), or nil
}

// A Dataset is a prepared corpus: the vocabulary and the three encoded
// splits.
type Dataset struct {
	Vocab                   *Vocab
	Train, Validation, Test *Split
	Report                  Report
	Input                   InputStats
	Cache                   CacheInfo

	closer *mapping // the token cache the splits view, if any
}

// Close releases the token cache file the splits view (a dataset read
// from the cache maps it); the splits' Tokens must not be used after it.
// It is safe to call on any dataset, more than once.
func (d *Dataset) Close() error {
	if d.closer == nil {
		return nil
	}
	m := d.closer
	d.closer = nil
	return m.close()
}

// Splits returns the training, validation and test splits in that order.
func (d *Dataset) Splits() []*Split { return []*Split{d.Train, d.Validation, d.Test} }

// Env is what Prepare reads besides the config: the folder relative paths
// resolve against, the cache folder ("" turns caching off) and standard
// input.
type Env struct {
	BaseDir  string
	CacheDir string
	Stdin    io.Reader
}

// Prepare reads the corpus cfg describes, learns the vocabulary on the
// training split, encodes the three splits and reports their sizes. The
// encoded result is cached in cacheDir (see the package documentation) and
// reused while the inputs and settings are unchanged. Relative paths in
// cfg.Files resolve against baseDir; "-" reads standard input.
func Prepare(ctx context.Context, cfg Config, baseDir, cacheDir string) (*Dataset, error) {
	return PrepareEnv(ctx, cfg, Env{BaseDir: baseDir, CacheDir: cacheDir, Stdin: os.Stdin})
}

// PrepareEnv is Prepare with the environment given explicitly.
func PrepareEnv(ctx context.Context, cfg Config, env Env) (*Dataset, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	srcs, err := resolveSources(cfg, env.BaseDir)
	if err != nil {
		return nil, err
	}
	var stdinSum []byte
	for i, s := range srcs {
		if s.Path != "-" {
			continue
		}
		if stdinSum != nil {
			return nil, fmt.Errorf("data.files: standard input (\"-\") listed twice")
		}
		path, sum, n, err := spoolStdin(env)
		if err != nil {
			return nil, err
		}
		defer os.Remove(path)
		srcs[i] = source{Path: path, Size: n, display: "-"}
		stdinSum = sum
	}
	key := cacheKey(cfg, srcs, stdinSum)
	var info CacheInfo
	if env.CacheDir != "" {
		info.Path = cachePath(env.CacheDir)
		ds, err := readCache(info.Path, key)
		switch {
		case err == nil:
			ds.Cache = CacheInfo{Path: info.Path, Hit: true}
			return ds, nil
		case errors.Is(err, ErrCorrupt):
			info.Damaged = err
		}
	}
	spool := ""
	if env.CacheDir != "" {
		if err := os.MkdirAll(env.CacheDir, 0o755); err != nil {
			return nil, fmt.Errorf("token cache: %w", err)
		}
		spool = env.CacheDir
	}
	ds, sinks, err := buildDataset(ctx, cfg, srcs, spool)
	defer func() {
		for _, k := range sinks {
			k.remove()
		}
	}()
	if err != nil {
		return nil, err
	}
	ds.Cache = info
	if env.CacheDir == "" {
		return ds, nil
	}
	if err := writeCache(info.Path, key, ds); err != nil {
		return nil, err
	}
	// The splits now view the cache just written, not the spool files.
	cached, err := openWritten(info.Path)
	if err != nil {
		return nil, err
	}
	cached.Cache = info
	return cached, nil
}

// openWritten opens a cache this process has just written: its checksum
// is checked, its ids are not read again.
func openWritten(path string) (*Dataset, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("token cache %q: %w", path, err)
	}
	ds, _, err := mapCache(f, path, false)
	return ds, err
}

// spoolStdin copies standard input to a temporary file, so the passes can
// read it again, and returns its SHA-256.
func spoolStdin(env Env) (string, []byte, int64, error) {
	if env.Stdin == nil {
		return "", nil, 0, fmt.Errorf("corpus standard input: not available")
	}
	dir := env.CacheDir
	if dir == "" {
		dir = os.TempDir()
	} else if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", nil, 0, fmt.Errorf("token cache: %w", err)
	}
	f, err := os.CreateTemp(dir, ".stdin-*")
	if err != nil {
		return "", nil, 0, fmt.Errorf("corpus standard input: %w", err)
	}
	h := sha256.New()
	n, err := io.Copy(io.MultiWriter(f, h), env.Stdin)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(f.Name())
		return "", nil, 0, fmt.Errorf("corpus standard input: %w", err)
	}
	return f.Name(), h.Sum(nil), n, nil
}

// Split indices.
const (
	iTrain = iota
	iValidation
	iTest
)

// walker reads the sources in order and hands each piece of normalized
// text to the split it belongs to.
type walker struct {
	cfg  Config
	srcs []source

	cut1, cut2 int64 // contiguous split: rune offsets where validation and test start

	// Callbacks.
	text    func(split int, p []byte)                // text of a split
	end     func(split int)                          // a token cannot continue past here
	lineEnd func(split int, hash uint64, blank bool) // a line ended (hash: FNV-1a of its bytes without "\n")
	docEnd  func(split int)                          // a file ended

	// Counts, filled by run.
	chars, lines [3]int64
	nonSpace     bool
	stats        InputStats
}

// FNV-1a, 64 bits (Fowler, Noll, Vo; the constants of the published spec).
const (
	fnvOffset = 14695981039346656037
	fnvPrime  = 1099511628211
)

// splitmix64 is the finaliser of Steele, Lea & Flood (2014), used as a
// seeded hash of positions.
func splitmix64(x uint64) uint64 {
	x += 0x9E3779B97F4A7C15
	x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9
	x = (x ^ (x >> 27)) * 0x94D049BB133111EB
	return x ^ (x >> 31)
}

// hashSplit assigns unit number n (a line or a file) to a split.
func (w *walker) hashSplit(n int64) int {
	u := float64(splitmix64(w.cfg.SplitSeed^splitmix64(uint64(n)))>>11) / (1 << 53)
	switch {
	case u < w.cfg.ValidationFraction:
		return iValidation
	case u < w.cfg.ValidationFraction+w.cfg.TestFraction:
		return iTest
	}
	return iTrain
}

func (w *walker) run(ctx context.Context) error {
	var (
		pos    int64  // runes so far
		lineNo int64  // lines so far, over all files
		hash   uint64 = fnvOffset
		blank         = true
		inLine        = false // the current line has text
		cur           = -1    // split of the current line or text
	)
	w.chars, w.lines = [3]int64{}, [3]int64{}
	w.stats = InputStats{}
	for doc, src := range w.srcs {
		f, err := os.Open(src.Path)
		if err != nil {
			return fileError(src.name(), err)
		}
		n := newNormalizer(f, src.name(), w.cfg.InvalidUTF8 == "replace")
		startLine := func() {
			switch w.cfg.Split {
			case "line":
				cur = w.hashSplit(lineNo)
			case "document":
				cur = w.hashSplit(int64(doc))
			default:
				cur = iTrain
				if pos >= w.cut1 {
					cur = iValidation
				}
				if pos >= w.cut2 {
					cur = iTest
				}
			}
		}
		endLine := func() {
			w.lines[cur]++
			lineNo++
			w.lineEnd(cur, hash, blank)
			if w.cfg.Split == "line" {
				w.end(cur)
			}
			hash, blank, inLine = fnvOffset, true, false
		}
		startLine()
		for {
			if err := ctx.Err(); err != nil {
				f.Close()
				return err
			}
			p, err := n.next()
			if err == io.EOF {
				break
			}
			if err != nil {
				f.Close()
				return err
			}
			for len(p) > 0 {
				if !inLine {
					startLine()
				}
				// The runes the current split may still take.
				limit := int64(math.MaxInt64)
				if w.cfg.Split == "contiguous" {
					switch cur {
					case iTrain:
						limit = w.cut1 - pos
					case iValidation:
						limit = w.cut2 - pos
					}
				}
				i, runes, nl := 0, int64(0), false
				for i < len(p) {
					b := p[i]
					if b&0xC0 != 0x80 {
						if runes == limit {
							break
						}
						runes++
					}
					if b == '\n' {
						i++
						nl = true
						break
					}
					hash = (hash ^ uint64(b)) * fnvPrime
					if blank {
						if b < utf8.RuneSelf {
							blank = b == ' ' || b == '\t' || b == '\r' || b == '\v' || b == '\f'
						} else if r, _ := utf8.DecodeRune(p[i:]); !unicode.IsSpace(r) {
							blank = false
						}
					}
					i++
				}
				if i > 0 {
					w.text(cur, p[:i])
					w.chars[cur] += runes
					pos += runes
					if !blank {
						w.nonSpace = true
					}
					inLine = true
				}
				p = p[i:]
				if nl {
					endLine()
				} else if runes == limit {
					// A contiguous cut inside a line: the line counts in
					// both splits.
					w.lines[cur]++
					w.end(cur)
					hash, blank, inLine = fnvOffset, true, false
				}
			}
		}
		f.Close()
		if inLine {
			endLine()
		}
		w.end(cur)
		w.docEnd(cur)
		w.stats.Files++
		w.stats.Bytes += n.offset
		w.stats.CRLF += n.stats.CRLF
		w.stats.Replaced += n.stats.Replaced
		w.stats.BOM += n.stats.BOM
	}
	return nil
}

// buildDataset runs the passes: count the characters (for the contiguous cuts),
// count the training pieces and collect the test lines, learn the
// vocabulary, then encode the three splits and count the leaked lines. The
// encoded ids go to temporary files in spool ("" keeps them in memory);
// the caller removes the returned sinks when done with the dataset's
// Tokens.
func buildDataset(ctx context.Context, cfg Config, srcs []source, spool string) (ds *Dataset, sinks [3]*tokenSink, err error) {
	kind, _ := parseKind(cfg.Tokenizer)
	nop := func(int) {}
	w := &walker{cfg: cfg, srcs: srcs, cut1: math.MaxInt64, cut2: math.MaxInt64,
		text: func(int, []byte) {}, end: nop, docEnd: nop, lineEnd: func(int, uint64, bool) {}}

	if cfg.Split == "contiguous" {
		if err := w.run(ctx); err != nil {
			return nil, sinks, err
		}
		total := w.chars[iTrain]
		w.cut1 = int64(math.Round(float64(total) * (1 - cfg.ValidationFraction - cfg.TestFraction)))
		w.cut2 = int64(math.Round(float64(total) * (1 - cfg.TestFraction)))
	}

	// Pass 2: training pieces and test lines.
	c := newCounter(kind, cfg.Lowercase)
	var inBytes int64
	for _, src := range srcs {
		inBytes += src.Size
	}
	if kind == KindBPE && inBytes > bpeSampleBytes {
		c.below = uint64(float64(bpeSampleBytes) / float64(inBytes) * (1 << 64))
		c.seed = cfg.SplitSeed
	}
	testLines := map[uint64]int64{}
	var trainDocs int64
	w.text = func(s int, p []byte) {
		if s == iTrain {
			c.write(p)
		}
	}
	w.end = func(s int) {
		if s == iTrain {
			c.flush()
		}
	}
	w.lineEnd = func(s int, h uint64, blank bool) {
		if s == iTest && !blank {
			testLines[h]++
		}
	}
	w.docEnd = func(s int) {
		if s == iTrain {
			trainDocs++
		}
	}
	if err := w.run(ctx); err != nil {
		return nil, sinks, err
	}
	if !w.nonSpace {
		return nil, sinks, fmt.Errorf("corpus %s: %w: empty or whitespace only", describeSources(srcs), ErrEmpty)
	}
	if w.chars[iTrain] == 0 {
		return nil, sinks, fmt.Errorf("corpus %s: %w in the training split", describeSources(srcs), ErrEmpty)
	}
	v := buildVocab(kind, c.counts(), cfg.vocabOptions())
	if cfg.Boundary == "document" {
		v.counts[1] = trainDocs
	}

	// Pass 3: encode.
	ds = &Dataset{Vocab: v}
	splits := [3]*Split{}
	encs := [3]*encoder{}
	for i, name := range []string{SplitTrain, SplitValidation, SplitTest} {
		s := &Split{Name: name, vocab: v, Offset: -1}
		if spool == "" {
			s.sink = newMemSink(cacheWidth(v.Len()))
		} else if s.sink, err = newFileSink(spool, cacheWidth(v.Len())); err != nil {
			return nil, sinks, err
		}
		sinks[i] = s.sink
		splits[i] = s
		encs[i] = v.newEncoder(s.addToken)
	}
	if cfg.Split == "contiguous" {
		splits[iTrain].Offset, splits[iValidation].Offset, splits[iTest].Offset = 0, w.cut1, w.cut2
	}
	var leaked int64
	w.text = func(s int, p []byte) { encs[s].write(p) }
	w.end = func(s int) { encs[s].flush() }
	w.lineEnd = func(s int, h uint64, blank bool) {
		if s == iTrain && !blank {
			if n, ok := testLines[h]; ok {
				leaked += n
				delete(testLines, h)
			}
		}
	}
	w.docEnd = func(s int) {
		if cfg.Boundary == "document" {
			splits[s].addToken(1, 0)
		}
	}
	if err := w.run(ctx); err != nil {
		return nil, sinks, err
	}
	for i, s := range splits {
		s.Characters, s.Lines = w.chars[i], w.lines[i]
		if s.Tokens, err = s.sink.finish(); err != nil {
			return nil, sinks, err
		}
		s.sink = nil
	}
	ds.Train, ds.Validation, ds.Test = splits[iTrain], splits[iValidation], splits[iTest]
	ds.Input = w.stats
	ds.Report = makeReport(ds, leaked)
	if c.below != 0 {
		ds.Report.BPESample = &BPESample{Pieces: c.kept, Of: c.seen, Seed: c.seed}
	}
	for _, chk := range []struct {
		s    *Split
		frac float64
		key  string
	}{{ds.Validation, cfg.ValidationFraction, "data.validation_fraction"}, {ds.Test, cfg.TestFraction, "data.test_fraction"}} {
		if chk.frac > 0 && chk.s.Tokens.Len() == 0 {
			return nil, sinks, fmt.Errorf("corpus %s: %w: the %s split is empty (%s %v of %d characters)",
				describeSources(srcs), ErrTooSmall, chk.s.Name, chk.key, chk.frac, w.chars[0]+w.chars[1]+w.chars[2])
		}
	}
	return ds, sinks, nil
}

func makeReport(ds *Dataset, leaked int64) Report {
	sr := func(s *Split) SplitReport {
		return SplitReport{Characters: s.Characters, Tokens: int64(s.Tokens.Len()), Lines: s.Lines, OOVRate: s.OOVRate()}
	}
	return Report{Train: sr(ds.Train), Validation: sr(ds.Validation), Test: sr(ds.Test),
		VocabularySize: ds.Vocab.Len(), LeakedTestLines: leaked}
}

// describeSources names the corpus in messages: the file, or the first
// file and how many others.
func describeSources(srcs []source) string {
	switch len(srcs) {
	case 0:
		return "(no files)"
	case 1:
		return displayName(srcs[0].name())
	}
	return fmt.Sprintf("%s and %d more files", displayName(srcs[0].name()), len(srcs)-1)
}
