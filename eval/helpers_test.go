package eval

import (
	"math"
	"testing"
)

// Tolerances, named so that every comparison says how close it must be.
const (
	tolExact = 1e-15 // a handful of float64 roundings
	tolRef   = 1e-12 // against reference-library output
	tolNorm  = 1e-9  // sums of a distribution over the vocabulary
)

// close reports whether got and want agree within tol, absolutely or
// relatively, whichever is looser.
func close(got, want, tol float64) bool {
	if got == want {
		return true
	}
	d := math.Abs(got - want)
	return d <= tol || d <= tol*math.Abs(want)
}

func checkClose(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if !close(got, want, tol) {
		t.Errorf("%s: got %.17g, want %.17g (tolerance %g)", what, got, want, tol)
	}
}

// words maps whitespace-separated words to ids in order of first sight.
type words struct {
	ids  map[string]int
	list []string
}

func newWords(vocab ...string) *words {
	w := &words{ids: map[string]int{}}
	for _, s := range vocab {
		w.id(s)
	}
	return w
}

func (w *words) id(s string) int {
	if i, ok := w.ids[s]; ok {
		return i
	}
	w.ids[s] = len(w.list)
	w.list = append(w.list, s)
	return w.ids[s]
}

func (w *words) seq(ss ...string) []int {
	out := make([]int, len(ss))
	for i, s := range ss {
		out[i] = w.id(s)
	}
	return out
}
