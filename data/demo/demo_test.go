package demo

import (
	"bytes"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

func generate(t testing.TB, seed uint64, size int) (string, Marks) {
	t.Helper()
	var b bytes.Buffer
	m, err := Generate(&b, seed, size)
	if err != nil {
		t.Fatal(err)
	}
	return b.String(), m
}

func TestDeterministic(t *testing.T) {
	a, ma := generate(t, 7, 200_000)
	b, mb := generate(t, 7, 200_000)
	c, _ := generate(t, 8, 200_000)
	if a != b || len(ma) != len(mb) {
		t.Fatal("same seed gave different text")
	}
	for i := range ma {
		if ma[i] != mb[i] {
			t.Fatalf("same seed gave different mark %d", i)
		}
	}
	if a == c {
		t.Error("seeds 7 and 8 gave the same text")
	}
	// A shorter text from the same seed is a prefix: records do not
	// depend on the size asked for.
	p, _ := generate(t, 7, 50_000)
	if !strings.HasPrefix(a, p) {
		t.Error("the 50 kB text is not a prefix of the 200 kB one")
	}
}

func TestSize(t *testing.T) {
	for _, size := range []int{0, 10, 300, 10_000, Size} {
		text, marks := generate(t, 1, size)
		if len(text) > size || (size >= 272 && len(text) < size-272) {
			t.Errorf("size %d: got %d bytes, want at most %d and within 272 of it", size, len(text), size)
		}
		if text != "" && !strings.HasSuffix(text, "\n") {
			t.Errorf("size %d: text does not end with a whole line", size)
		}
		for _, m := range marks {
			if m.Offset >= len(text) {
				t.Fatalf("size %d: mark at %d past the end %d", size, m.Offset, len(text))
			}
		}
	}
}

var recordRE = regexp.MustCompile(`^(\d\d):(\d\d) ([A-Z0-9]{7})> (MV|SS|FV|RV|MT) [A-Z]+( [A-Z]+)? [a-z ]+, berth \d+(, tug [A-Z]+)?\. confirm ([A-Z0-9]{7})\. (\d) lots?: (.*); note (.*) over\.$`)

// TestMarks parses every record independently of the generator and checks
// that the marks are exactly the long-range positions the package
// documents, and that each marked character is the one its source decides.
func TestMarks(t *testing.T) {
	text, marks := generate(t, 3, 300_000)
	byOffset := map[int]Mark{}
	for i, m := range marks {
		if i > 0 && m.Offset <= marks[i-1].Offset {
			t.Fatalf("marks not in increasing order at %d", i)
		}
		if m.Source >= m.Offset {
			t.Fatalf("mark %+v: source not earlier", m)
		}
		byOffset[m.Offset] = m
	}
	want := map[int]Mark{}
	calls := map[string]bool{}
	records := 0
	at := 0
	for _, line := range strings.SplitAfter(text, "\n") {
		start := at
		at += len(line)
		line = strings.TrimSuffix(line, "\n")
		if line == "" || strings.HasPrefix(line, "-- log day ") {
			continue
		}
		sub := recordRE.FindStringSubmatchIndex(line)
		if sub == nil {
			t.Fatalf("record does not parse: %q", line)
		}
		records++
		group := func(i int) string { return line[sub[2*i]:sub[2*i+1]] }
		call, again := group(3), group(7)
		calls[call] = true
		if call != again {
			t.Fatalf("call sign %s repeated as %s in %q", call, again, line)
		}
		if d := sub[14] - sub[6]; d < minDistance || d > maxDistance {
			t.Errorf("call sign repeated %d characters on, want 30-80: %q", d, line)
		}
		for i := 0; i < callLen; i++ {
			want[start+sub[14]+i] = Mark{start + sub[14] + i, start + sub[6] + i, CallSign}
		}
		// Count: the lots are separated by ", " and the count must agree.
		k, _ := strconv.Atoi(group(8))
		lots := strings.Split(group(9), ", ")
		if len(lots) != k {
			t.Fatalf("count %d but %d lots in %q", k, len(lots), line)
		}
		pos := sub[18]
		for _, lot := range lots {
			pos += len(lot)
			want[start+pos] = Mark{start + pos, start + sub[16], Count}
			pos += 2
		}
		// Brackets: match with a stack.
		rem, base := group(10), sub[20]
		var stack []int
		for i := 0; i < len(rem); i++ {
			c := rem[i]
			top := -1
			if len(stack) > 0 {
				top = stack[len(stack)-1]
			}
			closes := top >= 0 && (c == map[byte]byte{'(': ')', '[': ']', '{': '}', '"': '"'}[rem[top]])
			switch {
			case closes:
				want[start+base+i] = Mark{start + base + i, start + base + top, Close}
				stack = stack[:len(stack)-1]
			case strings.IndexByte("([{\"", c) >= 0:
				stack = append(stack, i)
			case strings.IndexByte(")]}", c) >= 0:
				t.Fatalf("unmatched %q in %q", c, rem)
			}
		}
		if len(stack) != 0 || !strings.HasPrefix(rem, string(rem[0])) || strings.IndexByte("([{\"", rem[0]) < 0 {
			t.Fatalf("remark %q not one closed group", rem)
		}
	}
	if len(want) != len(byOffset) {
		t.Errorf("parsed %d long-range positions, the generator marked %d", len(want), len(byOffset))
	}
	for off, w := range want {
		if got, ok := byOffset[off]; !ok || got != w {
			t.Errorf("at %d: got mark %+v, want %+v", off, got, w)
			break
		}
	}
	for _, m := range marks {
		if m.Kind == CallSign && text[m.Offset] != text[m.Source] {
			t.Errorf("call-sign mark at %d is %q, its source %q", m.Offset, text[m.Offset], text[m.Source])
		}
	}
	// Drawn from 36^7 signs, a few thousand records repeat none (the
	// birthday bound gives a chance of about n²/(2·36^7) < 1e-3).
	if len(calls) != records {
		t.Errorf("%d distinct call signs in %d records", len(calls), records)
	}
	if records < 1000 {
		t.Errorf("only %d records in 300 kB", records)
	}
}

var sink Marks

func BenchmarkGenerate(b *testing.B) {
	for _, size := range []int{Size} {
		b.Run("size="+strconv.Itoa(size), func(b *testing.B) {
			var buf bytes.Buffer
			buf.Grow(size)
			b.SetBytes(int64(size))
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				buf.Reset()
				m, err := Generate(&buf, 1, size)
				if err != nil {
					b.Fatal(err)
				}
				sink = m
			}
		})
	}
}

// TestCallDistanceRange checks the bounds the generator's comment derives
// from the field lengths: the repeat lies 43 to 72 characters on.
func TestCallDistanceRange(t *testing.T) {
	text, marks := generate(t, 5, Size)
	lo, hi := 1<<30, 0
	for _, m := range marks {
		if m.Kind == CallSign && m.Offset-m.Source > 0 {
			d := m.Offset - m.Source
			lo, hi = min(lo, d), max(hi, d)
		}
	}
	if lo < 43 || hi > 72 || len(text) == 0 {
		t.Errorf("call-sign distances %d to %d, want within 43 to 72", lo, hi)
	}
}
