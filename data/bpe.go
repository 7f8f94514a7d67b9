package data

import (
	"container/heap"
	"fmt"
	"sort"
	"unicode/utf8"
)

// maxMergeRunes is the longest piece of the word split, in runes, that
// byte-pair merges apply to; longer pieces (long runs of spaces or letters)
// are encoded as single characters, in learning and in encoding alike, so
// encoding stays linear in the text length.
const maxMergeRunes = 64

// bpeModel holds learned merges (Sennrich, Haddow & Birch 2016, "Neural
// machine translation of rare words with subword units", Algorithm 1): the
// symbols start as the characters of each word piece, and each merge joins
// the most frequent adjacent pair into a new symbol. Unlike the paper, no
// end-of-word marker is added: the word split keeps spaces as pieces of
// their own, so decoding is plain concatenation.
type bpeModel struct {
	alphabet []string    // base symbols: the runes of the training pieces, sorted
	merges   [][2]string // in the order learned, which is the order applied
	syms     []string    // alphabet, then one symbol per merge
	base     map[rune]int32
	rank     map[[2]int32]int32 // pair of symbols -> merge index
	result   []int32            // merge index -> symbol it makes
	symID    map[string]int32   // symbol text -> symbol (texts are unique)
	toVocab  []int32            // symbol -> vocabulary id (0 when pruned)
}

func newBPEModel(alphabet []string, merges [][2]string) (*bpeModel, error) {
	m := &bpeModel{alphabet: alphabet, base: map[rune]int32{}, rank: map[[2]int32]int32{}, symID: map[string]int32{}}
	ids := m.symID
	for _, a := range alphabet {
		r, size := utf8.DecodeRuneInString(a)
		if size != len(a) || r == utf8.RuneError {
			return nil, fmt.Errorf("bpe alphabet entry %q is not one character", a)
		}
		if _, dup := ids[a]; dup {
			return nil, fmt.Errorf("bpe alphabet entry %q repeated", a)
		}
		ids[a] = int32(len(m.syms))
		m.base[r] = int32(len(m.syms))
		m.syms = append(m.syms, a)
	}
	for k, pr := range merges {
		l, okL := ids[pr[0]]
		r, okR := ids[pr[1]]
		if !okL || !okR {
			return nil, fmt.Errorf("bpe merge %d (%q %q) joins an unknown symbol", k, pr[0], pr[1])
		}
		if _, dup := m.rank[[2]int32{l, r}]; dup {
			return nil, fmt.Errorf("bpe merge %d (%q %q) repeated", k, pr[0], pr[1])
		}
		m.addMerge(l, r)
	}
	return m, nil
}

// addMerge records the merge of symbols l and r and returns the symbol it
// makes. Two merges can make the same text ("ab"+"c", "a"+"bc"): they share
// one symbol, so that symbol texts stay unique.
func (m *bpeModel) addMerge(l, r int32) int32 {
	m.rank[[2]int32{l, r}] = int32(len(m.merges))
	m.merges = append(m.merges, [2]string{m.syms[l], m.syms[r]})
	text := m.syms[l] + m.syms[r]
	id, ok := m.symID[text]
	if !ok {
		id = int32(len(m.syms))
		m.syms = append(m.syms, text)
		m.symID[text] = id
	}
	m.result = append(m.result, id)
	return id
}

// baseSymbols appends the base symbols of p (-1 for a rune outside the
// alphabet).
func (m *bpeModel) baseSymbols(dst []int32, p []byte) []int32 {
	for _, r := range string(p) {
		id, ok := m.base[r]
		if !ok {
			id = -1
		}
		dst = append(dst, id)
	}
	return dst
}

// apply merges the symbols s in rank order: while some adjacent pair has a
// merge, the pair with the lowest rank is joined at every place it occurs,
// left to right.
func (m *bpeModel) apply(s []int32) []int32 {
	if len(s) > maxMergeRunes {
		return s
	}
	for len(s) > 1 {
		best, at := int32(-1), -1
		for i := 0; i+1 < len(s); i++ {
			if k, ok := m.rank[[2]int32{s[i], s[i+1]}]; ok && (best < 0 || k < best) {
				best, at = k, i
			}
		}
		if at < 0 {
			break
		}
		l, r := s[at], s[at+1]
		merged := m.result[best]
		w := at
		for i := at; i < len(s); {
			if i+1 < len(s) && s[i] == l && s[i+1] == r {
				s[w] = merged
				i += 2
			} else {
				s[w] = s[i]
				i++
			}
			w++
		}
		s = s[:w]
	}
	return s
}

// encode appends the vocabulary ids of the piece p.
func (m *bpeModel) encode(dst []int32, p []byte) []int32 {
	start := len(dst)
	dst = m.apply(m.baseSymbols(dst, p)[start:])
	for i, s := range dst {
		if s < 0 {
			dst[i] = 0
		} else {
			dst[i] = m.toVocab[s]
		}
	}
	return dst
}

// link maps the symbols to vocabulary ids.
func (m *bpeModel) link(index map[string]int32) {
	m.toVocab = make([]int32, len(m.syms))
	for i, s := range m.syms {
		m.toVocab[i] = index[s]
	}
}

// symbolCounts returns how often each symbol occurs once the merges apply
// to the word pieces counted in counts.
func (m *bpeModel) symbolCounts(counts map[string]int64) map[string]int64 {
	out := map[string]int64{}
	var buf []int32
	for p, n := range counts {
		buf = m.apply(m.baseSymbols(buf[:0], []byte(p)))
		for _, s := range buf {
			out[m.syms[s]] += n
		}
	}
	return out
}

// learnBPE learns up to merges merges from the counts of word pieces. A pair
// must occur at least twice to be merged. Ties between pairs of equal
// count go to the pair whose left symbol, then right symbol, sorts first
// by bytes, so learning is deterministic.
func learnBPE(counts map[string]int64, merges int) *bpeModel {
	pieces := make([]string, 0, len(counts))
	set := map[rune]bool{}
	for p := range counts {
		pieces = append(pieces, p)
		for _, r := range p {
			set[r] = true
		}
	}
	sort.Strings(pieces)
	alphabet := make([]string, 0, len(set))
	for r := range set {
		alphabet = append(alphabet, string(r))
	}
	sort.Strings(alphabet)
	m, err := newBPEModel(alphabet, nil)
	if err != nil {
		panic("data: " + err.Error()) // the alphabet is made of single runes
	}

	type word struct {
		s []int32
		n int64
	}
	var words []word
	pairs := map[[2]int32]int64{}
	where := map[[2]int32][]int32{}
	for _, p := range pieces {
		if utf8.RuneCountInString(p) > maxMergeRunes || len(p) < 2 {
			continue
		}
		w := word{s: m.baseSymbols(nil, []byte(p)), n: counts[p]}
		if len(w.s) < 2 {
			continue
		}
		for i := 0; i+1 < len(w.s); i++ {
			pr := [2]int32{w.s[i], w.s[i+1]}
			pairs[pr] += w.n
			where[pr] = append(where[pr], int32(len(words)))
		}
		words = append(words, w)
	}
	h := &pairHeap{syms: &m.syms}
	for pr, n := range pairs {
		h.items = append(h.items, pairItem{pr, n})
	}
	heap.Init(h)

	seen := make([]int, len(words))
	touched := map[[2]int32]bool{}
	for k := 1; k <= merges && h.Len() > 0; k++ {
		top := heap.Pop(h).(pairItem)
		if pairs[top.pair] != top.n {
			k-- // stale entry
			continue
		}
		if top.n < 2 {
			break
		}
		l, r := top.pair[0], top.pair[1]
		merged := m.addMerge(l, r)
		clear(touched)
		for _, idx := range where[top.pair] {
			if seen[idx] == k {
				continue
			}
			seen[idx] = k
			w := &words[idx]
			has := false
			for i := 0; i+1 < len(w.s); i++ {
				if w.s[i] == l && w.s[i+1] == r {
					has = true
					break
				}
			}
			if !has {
				continue
			}
			for i := 0; i+1 < len(w.s); i++ {
				pr := [2]int32{w.s[i], w.s[i+1]}
				pairs[pr] -= w.n
				touched[pr] = true
			}
			o := 0
			for i := 0; i < len(w.s); {
				if i+1 < len(w.s) && w.s[i] == l && w.s[i+1] == r {
					w.s[o] = merged
					i += 2
				} else {
					w.s[o] = w.s[i]
					i++
				}
				o++
			}
			w.s = w.s[:o]
			for i := 0; i+1 < len(w.s); i++ {
				pr := [2]int32{w.s[i], w.s[i+1]}
				pairs[pr] += w.n
				where[pr] = append(where[pr], idx)
				touched[pr] = true
			}
		}
		delete(pairs, top.pair)
		delete(where, top.pair)
		for pr := range touched {
			if n := pairs[pr]; n > 0 {
				heap.Push(h, pairItem{pr, n})
			} else if n == 0 {
				delete(pairs, pr)
			}
		}
	}
	return m
}

type pairItem struct {
	pair [2]int32
	n    int64
}

// pairHeap orders pairs by count, most frequent first, ties by the bytes
// of the left then the right symbol.
type pairHeap struct {
	items []pairItem
	syms  *[]string
}

func (h *pairHeap) Len() int { return len(h.items) }
func (h *pairHeap) Less(i, j int) bool {
	a, b := h.items[i], h.items[j]
	if a.n != b.n {
		return a.n > b.n
	}
	s := *h.syms
	if s[a.pair[0]] != s[b.pair[0]] {
		return s[a.pair[0]] < s[b.pair[0]]
	}
	return s[a.pair[1]] < s[b.pair[1]]
}
func (h *pairHeap) Swap(i, j int) { h.items[i], h.items[j] = h.items[j], h.items[i] }
func (h *pairHeap) Push(x any)    { h.items = append(h.items, x.(pairItem)) }
func (h *pairHeap) Pop() any {
	x := h.items[len(h.items)-1]
	h.items = h.items[:len(h.items)-1]
	return x
}
