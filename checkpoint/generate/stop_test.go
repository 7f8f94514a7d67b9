package generate

import (
	"bytes"
	"strings"
	"testing"
)

func TestStopText(t *testing.T) {
	for _, tc := range []struct {
		stops   []string
		pieces  []string
		want    string
		stopped bool
	}{
		{[]string{"END"}, []string{"ab", "cE", "N", "D", "x"}, "abc", true},
		{[]string{"END"}, []string{"ab", "cE", "N", "x"}, "abcENx", false},
		{[]string{"xy", "b"}, []string{"a", "xb"}, "ax", true},
		{nil, []string{"a", "b"}, "ab", false},
	} {
		var out bytes.Buffer
		st := &stopText{stops: tc.stops, out: func(s string) error { out.WriteString(s); return nil }}
		stopped := false
		for _, p := range tc.pieces {
			s, err := st.add(p)
			if err != nil {
				t.Fatal(err)
			}
			if s {
				stopped = true
				break
			}
			// Nothing of a possible stop string is written early.
			for _, stop := range tc.stops {
				if strings.Contains(out.String(), stop) {
					t.Errorf("%v: wrote %q before the stop", tc.pieces, out.String())
				}
			}
		}
		st.finish()
		if out.String() != tc.want || string(st.text) != tc.want || stopped != tc.stopped {
			t.Errorf("%v stops %q: wrote %q text %q stopped %v, want %q %v", tc.pieces, tc.stops, out.String(), st.text, stopped, tc.want, tc.stopped)
		}
	}
}

// FuzzStopText checks the stop-string writer on any pieces: what it writes
// is its text, a prefix of the pieces joined, free of the stop string, and
// when it stops the stop string follows the text in the joined pieces.
func FuzzStopText(f *testing.F) {
	f.Add("END", "ab|cE|N|D|x")
	f.Add("aa", "a|a|a")
	f.Add("\n\n", "x\n|\ny")
	f.Fuzz(func(t *testing.T, stop, pieces string) {
		if stop == "" {
			return
		}
		var out bytes.Buffer
		st := &stopText{stops: []string{stop}, out: func(s string) error { out.WriteString(s); return nil }}
		joined, stopped := "", false
		for _, p := range strings.Split(pieces, "|") {
			joined += p
			s, err := st.add(p)
			if err != nil {
				t.Fatal(err)
			}
			if s {
				stopped = true
				break
			}
		}
		st.finish()
		text := string(st.text)
		if out.String() != text || !strings.HasPrefix(joined, text) || strings.Contains(text, stop) {
			t.Fatalf("stop %q pieces %q: wrote %q, text %q", stop, pieces, out.String(), text)
		}
		if stopped != strings.Contains(joined, stop) {
			t.Fatalf("stop %q pieces %q: stopped=%v", stop, pieces, stopped)
		}
		if stopped && !strings.HasPrefix(joined, text+stop) {
			t.Fatalf("stop %q pieces %q: text %q is not followed by the stop", stop, pieces, text)
		}
	})
}
