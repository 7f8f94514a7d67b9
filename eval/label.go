package eval

import (
	"errors"
	"fmt"
	"path/filepath"
	"strconv"
	"strings"
)

// Baseline labels name a fitted baseline in tables and on the command
// line. They are formatted here (the Name methods of NGram, MarkovChain
// and HMM call BaselineSpec.String) and parsed back here
// (ParseBaselineLabel), so the two never drift apart:
//
//	5-gram kneser_ney        an n-gram model: order, smoothing method
//	3-gram add_k(0.5)        add_k with its pseudo-count
//	markov-2(add 1)          a Markov chain: context length, pseudo-count
//	hmm-16                   a hidden Markov model: states
//
// Parsing also accepts "_" or "-" for the space of an n-gram label and
// labels without the pseudo-count ("3-gram add_k", "markov-2"), which
// then comes from the configuration.

// BaselineSpec is what a baseline label says.
type BaselineSpec struct {
	// Kind is "ngram", "markov" or "hmm".
	Kind string
	// Order is the n-gram order (ngram).
	Order int
	// Method is the n-gram smoothing method (ngram).
	Method Method
	// K is the pseudo-count of add_k and of a Markov chain; 0 when the
	// label gives none.
	K float64
	// Context is the Markov chain's context length (markov).
	Context int
	// States is the HMM's number of states (hmm).
	States int
}

// String formats the label.
func (s BaselineSpec) String() string {
	k := strconv.FormatFloat(s.K, 'g', -1, 64)
	switch s.Kind {
	case "ngram":
		l := fmt.Sprintf("%d-gram %s", s.Order, s.Method)
		if s.Method == AddK && s.K > 0 {
			l += "(" + k + ")"
		}
		return l
	case "markov":
		if s.K > 0 {
			return fmt.Sprintf("markov-%d(add %s)", s.Context, k)
		}
		return fmt.Sprintf("markov-%d", s.Context)
	case "hmm":
		return fmt.Sprintf("hmm-%d", s.States)
	}
	return "unknown baseline"
}

// ErrBadLabel is wrapped by the errors of ParseBaselineLabel.
var ErrBadLabel = errors.New(`want a baseline label such as "5-gram kneser_ney", "3-gram add_k(0.5)", "markov-2" or "hmm-16"`)

// ParseBaselineLabel reads a label written by BaselineSpec.String.
func ParseBaselineLabel(label string) (BaselineSpec, error) {
	bad := func() (BaselineSpec, error) { return BaselineSpec{}, fmt.Errorf("%q: %w", label, ErrBadLabel) }
	// A pseudo-count in brackets at the end: "(0.5)" or "(add 0.5)".
	body, k := label, 0.0
	if i := strings.IndexByte(label, '('); i >= 0 {
		if !strings.HasSuffix(label, ")") {
			return bad()
		}
		body = label[:i]
		arg := strings.TrimPrefix(label[i+1:len(label)-1], "add ")
		v, err := strconv.ParseFloat(arg, 64)
		if err != nil || !(v > 0) || v > 1e300 {
			return BaselineSpec{}, fmt.Errorf("%q: pseudo-count %q is not a positive number", label, arg)
		}
		k = v
	}
	number := func(s string) (int, bool) {
		n, err := strconv.Atoi(s)
		return n, err == nil && n >= 0 && s != "" && s[0] != '+'
	}
	switch {
	case strings.HasPrefix(body, "hmm-"):
		n, ok := number(body[len("hmm-"):])
		if !ok || k != 0 {
			return bad()
		}
		return BaselineSpec{Kind: "hmm", States: n}, nil
	case strings.HasPrefix(body, "markov-"):
		n, ok := number(body[len("markov-"):])
		if !ok || (k != 0 && !strings.Contains(label, "(add ")) {
			return bad()
		}
		return BaselineSpec{Kind: "markov", Context: n, K: k}, nil
	}
	i := strings.Index(body, "-gram")
	if i < 0 || len(body) < i+len("-gram")+2 {
		return bad()
	}
	order, ok := number(body[:i])
	sep := body[i+len("-gram")]
	if !ok || (sep != ' ' && sep != '_' && sep != '-') {
		return bad()
	}
	m, err := ParseMethod(body[i+len("-gram")+1:])
	if err != nil || (k != 0 && (m != AddK || strings.Contains(label, "(add "))) {
		return bad()
	}
	return BaselineSpec{Kind: "ngram", Order: order, Method: m, K: k}, nil
}

// LoadBaseline rebuilds the baseline s names from the folder dir written
// by Ladder.Save: an n-gram model or a Markov chain from CountsFile, an
// HMM from HMMFile. k is the pseudo-count of add_k and of a Markov chain
// when s gives none. A missing file gives an error wrapping
// os.ErrNotExist.
func LoadBaseline(dir string, s BaselineSpec, k float64) (LanguageModel, error) {
	if s.K > 0 {
		k = s.K
	}
	switch s.Kind {
	case "hmm":
		return LoadHMM(filepath.Join(dir, HMMFile(s.States)))
	case "ngram", "markov":
		c, err := LoadCounts(filepath.Join(dir, CountsFile))
		if err != nil {
			return nil, err
		}
		if s.Kind == "markov" {
			return NewMarkovChain(c, s.Context, k)
		}
		sm := Smoothing{Method: s.Method}
		if s.Method == AddK {
			sm.K = k
		}
		return NewNGram(c, s.Order, sm)
	}
	return nil, fmt.Errorf("baseline kind %q: %w", s.Kind, ErrBadLabel)
}
