// Package demo generates weft's built-in demo corpus: the radio log of the
// dispatch desk of Port Averly, an invented harbour. It is seeded and
// deterministic, and made so that part of it is predictable only from
// long-range context, which a recurrent model can learn and an n-gram
// model cannot.
//
// # Text
//
// The text is pure ASCII, so rune offsets equal byte offsets. It is a
// sequence of lines. A day header "-- log day N --" opens each day; every
// other line is one record:
//
//	06:12 K7QX2ML> MV BRANWEN ALVA inbound, berth 14, tug WREN. confirm K7QX2ML. 3 lots: timber, salt cod, coal; note (pilot "Harte [relief]" aboard) over.
//
// The fields are the time (minutes advance by 0 to 7 between records, and
// a new day starts after 23:59), the call sign, the vessel class and name,
// the movement, the berth, the tug, the confirmation, the cargo lots, a
// remark in nested brackets and quotes, and "over.". The vocabulary of
// classes, names, movements, tugs, cargo and remark words is small and
// fixed: these are the local regularities that n-gram counts capture.
//
// # Long-range positions
//
// Three kinds of character are decided by earlier context that lies
// beyond any short window, and Generate returns their offsets as Marks:
//
//   - CallSign: the 7 characters of the call sign after "confirm ". A call
//     sign is 7 characters drawn uniformly from A-Z and 0-9 (36^7, about
//     7.8e10 signs), so no count of earlier text predicts it, but each
//     character equals the one at the same place in the call sign at the
//     record's start, 30 to 80 characters earlier (the distance from the
//     first character of the call sign to the first of its repeat; the
//     field lengths used keep it within 43 to 72).
//   - Count: the separator after each cargo lot: "," after lots 1 to k−1
//     and ";" after lot k, where k (1 to 5) is the count written before
//     "lots:". Lots are one or two words, so the separator depends on how
//     many lots came since the count, not on the last few characters.
//   - Close: each closing bracket or quote of the remark, which must match
//     the innermost open one: ")" for "(", "]" for "[", "}" for "{" and
//     '"' for '"'. Remarks nest 1 to 3 deep; a quote never opens inside a
//     quote.
//
// Mark.Source is the offset of the character that decides the marked one:
// the same character of the first call sign, the count digit, or the
// opening bracket.
package demo

import (
	"bufio"
	"fmt"
	"io"
	"math/rand/v2"
	"strconv"
)

// Kind is the kind of long-range dependency a Mark stands for.
type Kind uint8

// The kinds of mark; see the package documentation.
const (
	CallSign Kind = iota + 1
	Count
	Close
)

func (k Kind) String() string {
	switch k {
	case CallSign:
		return "call_sign"
	case Count:
		return "count"
	case Close:
		return "close"
	}
	return "unknown"
}

// A Mark is a character of the generated text that earlier long-range
// context decides.
type Mark struct {
	Offset int  // rune offset of the marked character in the text
	Source int  // rune offset of the earlier character that decides it
	Kind   Kind // what decides it
}

// Marks lists the long-range positions of a text in increasing Offset.
type Marks []Mark

// Offsets returns the offsets of the marks of kind k (all marks when k is
// 0), in increasing order.
func (m Marks) Offsets(k Kind) []int {
	var out []int
	for _, x := range m {
		if k == 0 || x.Kind == k {
			out = append(out, x.Offset)
		}
	}
	return out
}

// Size is the default corpus size in bytes.
const Size = 2 << 20

// Call sign shape: the length and the distance range of its repeat.
const (
	callLen     = 7
	minDistance = 30
	maxDistance = 80
)

var (
	classes   = []string{"MV", "SS", "FV", "RV", "MT"}
	names     = []string{"BRANWEN", "ALVA", "CORRIE", "DUNMORE", "ELSPETH", "FARRAN", "GILLAN", "HESKETH", "INVERLY", "JURA", "KESTON", "LOWRIE", "MARRAN", "NEVIS", "ORLA", "PENTLAND", "QUARRY", "ROSLIN", "SKERRY", "TARBET", "ULVA", "VORLICH", "WESTRAY", "YARROW"}
	movements = []string{"inbound", "outbound", "shifting", "at anchor", "alongside"}
	tugs      = []string{"WREN", "OTTER", "KESTREL", "PUFFIN", "SELKIE", "MERLIN", "HERON"}
	cargo     = []string{"timber", "salt cod", "coal", "wool bales", "copper wire", "rope", "barley", "slate", "fish oil", "tinned peaches", "lamp oil", "granite setts", "tea chests", "nets"}
	remarks   = []string{"pilot", "aboard", "tide", "neap", "low", "relief", "crew", "ashore", "fog", "bell", "Harte", "Moray", "swell", "easing", "lines", "fast", "customs", "cleared", "waiting", "berth"}
	openers   = []byte{'(', '[', '{', '"'}
	closerOf  = map[byte]byte{'(': ')', '[': ']', '{': '}', '"': '"'}
	alphabet  = "ABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789"
)

// gen builds one record at a time.
type gen struct {
	r     *rand.Rand
	rec   []byte
	marks Marks // offsets relative to the record
}

func (g *gen) pick(list []string) string { return list[g.r.IntN(len(list))] }

func (g *gen) add(s string) { g.rec = append(g.rec, s...) }

// remark appends a bracketed group nested up to depth more levels.
func (g *gen) remark(depth int, inQuote bool) {
	var open byte
	for {
		open = openers[g.r.IntN(len(openers))]
		if !(inQuote && open == '"') {
			break
		}
	}
	at := len(g.rec)
	g.rec = append(g.rec, open)
	words := 1 + g.r.IntN(3)
	nestAt := -1
	if depth > 1 && g.r.IntN(3) > 0 {
		nestAt = g.r.IntN(words + 1)
	}
	for i := 0; i <= words; i++ {
		if i == nestAt {
			if len(g.rec) > at+1 {
				g.add(" ")
			}
			g.remark(depth-1, inQuote || open == '"')
		}
		if i < words {
			if len(g.rec) > at+1 {
				g.add(" ")
			}
			g.add(g.pick(remarks))
		}
	}
	g.marks = append(g.marks, Mark{Offset: len(g.rec), Source: at, Kind: Close})
	g.rec = append(g.rec, closerOf[open])
}

// record builds one record line for the time hh:mm.
func (g *gen) record(hh, mm int) {
	g.rec, g.marks = g.rec[:0], g.marks[:0]
	g.rec = fmt.Appendf(g.rec, "%02d:%02d ", hh, mm)
	callAt := len(g.rec)
	var call [callLen]byte
	for i := range call {
		call[i] = alphabet[g.r.IntN(len(alphabet))]
	}
	g.rec = append(g.rec, call[:]...)
	// The middle. Its field lengths put the repeat 43 to 72 characters
	// after the first call sign (7 + 36 at the shortest, 7 + 65 at the
	// longest), inside the documented 30 to 80.
	g.add("> ")
	g.add(g.pick(classes))
	g.add(" ")
	g.add(g.pick(names))
	if g.r.IntN(2) == 0 {
		g.add(" ")
		g.add(g.pick(names))
	}
	g.add(" ")
	g.add(g.pick(movements))
	g.add(", berth ")
	g.add(strconv.Itoa(1 + g.r.IntN(40)))
	if g.r.IntN(3) > 0 {
		g.add(", tug ")
		g.add(g.pick(tugs))
	}
	g.add(". confirm ")
	for i := range call {
		g.marks = append(g.marks, Mark{Offset: len(g.rec) + i, Source: callAt + i, Kind: CallSign})
	}
	g.rec = append(g.rec, call[:]...)
	g.add(". ")
	k := 1 + g.r.IntN(5)
	countAt := len(g.rec)
	g.rec = strconv.AppendInt(g.rec, int64(k), 10)
	if k == 1 {
		g.add(" lot: ")
	} else {
		g.add(" lots: ")
	}
	for i := 1; i <= k; i++ {
		g.add(g.pick(cargo))
		sep := byte(',')
		if i == k {
			sep = ';'
		}
		g.marks = append(g.marks, Mark{Offset: len(g.rec), Source: countAt, Kind: Count})
		g.rec = append(g.rec, sep, ' ')
	}
	g.add("note ")
	g.remark(1+g.r.IntN(3), false)
	g.add(" over.\n")
}

// Generate writes a demo log of at most size bytes to w, made of whole
// lines, and returns its long-range marks. The same seed and size give the
// same text. It stops before the first line that would not fit; the text
// is then within one record (at most 272 bytes, derived from the field
// lengths) of size.
func Generate(w io.Writer, seed uint64, size int) (Marks, error) {
	if size < 0 {
		return nil, fmt.Errorf("demo: size must not be negative, got %d", size)
	}
	bw := bufio.NewWriterSize(w, 64<<10)
	g := &gen{r: rand.New(rand.NewPCG(seed, 0x5eed_a7e1_0f_d0c5))}
	var marks Marks
	total, day, minute := 0, 1, 0
	header := func() []byte { return fmt.Appendf(nil, "-- log day %d --\n", day) }
	for {
		h := header()
		if total+len(h) > size {
			break
		}
		if _, err := bw.Write(h); err != nil {
			return nil, err
		}
		total += len(h)
		full := false
		for minute < 24*60 {
			g.record(minute/60, minute%60)
			if total+len(g.rec) > size {
				full = true
				break
			}
			for _, m := range g.marks {
				marks = append(marks, Mark{Offset: total + m.Offset, Source: total + m.Source, Kind: m.Kind})
			}
			if _, err := bw.Write(g.rec); err != nil {
				return nil, err
			}
			total += len(g.rec)
			minute += g.r.IntN(8)
		}
		if full {
			break
		}
		day++
		minute -= 24 * 60
	}
	return marks, bw.Flush()
}
