package corpustest

import (
	"bufio"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"unicode/utf8"
)

// Generate writes exactly size bytes of invented prose to w, the same bytes
// for the same seed, without holding more than a buffer of it: field notes
// of an invented survey of a river delta, in an invented language. Words come
// from a list of 4,096 words built from syllables by PCG(seed, 1); each is
// drawn with a Zipf probability proportional to 1/rank (common practice for
// word frequencies: Zipf 1949), so a few short words are very frequent and
// most are rare. About one word in 97 of the list is a number and one in 61
// carries an accented letter (2-byte UTF-8), so the char tokenizer sees a
// realistic alphabet of about 65 characters. Sentences of 3 to 22 words start
// with a capital and end with ". ", "? " or "! ", with commas inside; lines
// wrap at a width drawn from 40 to 99 characters, and a blank line ends a
// paragraph of 2 to 9 lines. The last byte is "\n" and a multi-byte
// character is never cut. size must be at least 1.
//
// The text never repeats a line on purpose, but the same short line may
// occur twice by chance, as in real notes. Generate runs at a few hundred
// megabytes per second on one core (BenchmarkGenerate).
func Generate(w io.Writer, size int64, seed uint64) error {
	if size < 1 {
		return fmt.Errorf("corpustest: generate %d bytes: want at least 1", size)
	}
	g := newGenerator(seed)
	buf := make([]byte, 0, 1<<20)
	left := size
	for left > 0 {
		buf = g.fill(buf[:0], cap(buf)-128)
		if int64(len(buf)) >= left {
			buf = finish(buf[:left])
		}
		if _, err := w.Write(buf); err != nil {
			return err
		}
		left -= int64(len(buf))
	}
	return nil
}

// WriteFile writes size bytes of Generate's text for seed to a new file at
// path.
func WriteFile(path string, size int64, seed uint64) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(f, 1<<20)
	err = Generate(bw, size, seed)
	if err == nil {
		err = bw.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}

// finish makes b, the last piece of the text, end on a whole character
// followed by "\n": a character cut by the end is replaced by spaces.
func finish(b []byte) []byte {
	n := len(b) - 1 // b[n] becomes the final newline
	i := n
	for i > 0 && i > n-utf8.UTFMax && !utf8.RuneStart(b[i]) {
		i--
	}
	// b[i] starts the last character before the newline's place: keep it
	// only when it fits whole.
	if i < n && !utf8.FullRune(b[i:n]) {
		for j := i; j < n; j++ {
			b[j] = ' '
		}
	}
	b[n] = '\n'
	return b
}

const (
	genWords     = 4096
	genTableBits = 16
)

type generator struct {
	r     *rand.PCG
	words [genWords][]byte // lower case
	caps  [genWords][]byte // capitalised, starting a sentence
	table [1 << genTableBits]uint16
	bits  uint64 // random bits not used yet
	nbits int

	col, width int // column on this line, and the line's width
	lines      int // lines left in this paragraph
	sentence   int // words left in this sentence
	sinceComma int
}

// syllables and accented letters of the invented language.
var (
	genOnsets  = []string{"", "b", "d", "f", "g", "h", "k", "l", "m", "n", "p", "r", "s", "t", "v", "w", "br", "dr", "gl", "kr", "st", "th", "sh", "tr", "pl"}
	genNuclei  = []string{"a", "e", "i", "o", "u", "a", "e", "o", "ai", "ou", "ea", "y"}
	genCodas   = []string{"", "", "", "n", "r", "l", "s", "t", "m", "k", "nd", "st", "rn"}
	genAccents = []string{"é", "ø", "å", "ü", "ñ", "ç"}
)

func newGenerator(seed uint64) *generator {
	g := &generator{r: rand.NewPCG(seed, 1)}
	rr := rand.New(g.r)
	seen := map[string]bool{}
	for i := 0; i < genWords; {
		var w []byte
		switch {
		case i%97 == 13:
			w = fmt.Appendf(nil, "%d", 1+rr.IntN(2000))
		default:
			// Frequent words are short: 1 syllable for the first ranks, up
			// to 4 for the rare ones.
			n := 1 + rr.IntN(1+min(3, i/64))
			for s := 0; s < n; s++ {
				w = append(w, genOnsets[rr.IntN(len(genOnsets))]...)
				w = append(w, genNuclei[rr.IntN(len(genNuclei))]...)
				w = append(w, genCodas[rr.IntN(len(genCodas))]...)
			}
			if i%61 == 7 {
				w = append(w, genAccents[rr.IntN(len(genAccents))]...)
			}
		}
		if seen[string(w)] {
			continue
		}
		seen[string(w)] = true
		g.words[i] = w
		c := append([]byte(nil), w...)
		if c[0] >= 'a' && c[0] <= 'z' {
			c[0] -= 'a' - 'A'
		}
		g.caps[i] = c
		i++
	}
	// The Zipf table: slot j holds the rank whose cumulative probability
	// first passes (j + 0.5) / 2^16.
	var h float64
	for i := 1; i <= genWords; i++ {
		h += 1 / float64(i)
	}
	cum, rank := 0.0, 0
	for j := range g.table {
		p := (float64(j) + 0.5) / float64(len(g.table))
		for rank < genWords-1 && cum+1/(float64(rank+1)*h) < p {
			cum += 1 / (float64(rank+1) * h)
			rank++
		}
		g.table[j] = uint16(rank)
	}
	g.newLine()
	g.lines = 2 + g.intn(8)
	return g
}

// intn returns a number below n (n at most 2^16) from the spare random bits.
func (g *generator) intn(n int) int {
	return int(g.take() % uint64(n))
}

// take returns 16 random bits.
func (g *generator) take() uint64 {
	if g.nbits < genTableBits {
		g.bits = g.r.Uint64()
		g.nbits = 64
	}
	v := g.bits & (1<<genTableBits - 1)
	g.bits >>= genTableBits
	g.nbits -= genTableBits
	return v
}

func (g *generator) newLine() {
	g.col = 0
	g.width = 40 + g.intn(60)
}

// fill appends words to b until it holds at least n bytes.
func (g *generator) fill(b []byte, n int) []byte {
	for len(b) < n {
		var w []byte
		if g.sentence == 0 {
			g.sentence = 3 + g.intn(20)
			g.sinceComma = 0
			w = g.caps[g.table[g.take()]]
		} else {
			w = g.words[g.table[g.take()]]
		}
		if g.col > 0 {
			if g.col+1+len(w) > g.width {
				b = append(b, '\n')
				g.newLine()
				g.lines--
				if g.lines == 0 {
					b = append(b, '\n')
					g.lines = 2 + g.intn(8)
				}
			} else {
				b = append(b, ' ')
				g.col++
			}
		}
		b = append(b, w...)
		g.col += len(w)
		g.sentence--
		g.sinceComma++
		switch {
		case g.sentence == 0:
			switch p := g.intn(16); {
			case p == 0:
				b = append(b, '?')
			case p == 1:
				b = append(b, '!')
			default:
				b = append(b, '.')
			}
			g.col++
		case g.sinceComma > 3 && g.intn(8) == 0:
			b = append(b, ',')
			g.col++
			g.sinceComma = 0
		}
	}
	return b
}
