package surprise

import (
	"container/heap"
	"slices"
)

// Ranking keeps rows to list them most surprising first (by bits per
// character; of two equally surprising rows, the one scored first comes
// first). With a limit it keeps only that many, in memory bounded by the
// limit; without one it keeps every row.
type Ranking struct {
	limit int
	rows  rowHeap
}

// NewRanking returns a ranking of the limit most surprising rows; 0 keeps
// all.
func NewRanking(limit int) *Ranking { return &Ranking{limit: limit} }

// Add offers a row.
func (r *Ranking) Add(row Row) {
	switch {
	case r.limit <= 0:
		r.rows = append(r.rows, row)
	case r.rows.Len() < r.limit:
		heap.Push(&r.rows, row)
	case less(r.rows[0], row):
		r.rows[0] = row
		heap.Fix(&r.rows, 0)
	}
}

// Rows returns the kept rows, most surprising first.
func (r *Ranking) Rows() []Row {
	rows := slices.Clone([]Row(r.rows))
	slices.SortStableFunc(rows, func(a, b Row) int {
		switch {
		case less(b, a):
			return -1
		case less(a, b):
			return 1
		}
		return 0
	})
	return rows
}

// less orders rows by surprise: a is less surprising than b by bits per
// character, or equally surprising and scored later.
func less(a, b Row) bool {
	if a.BitsPerChar != b.BitsPerChar {
		return a.BitsPerChar < b.BitsPerChar
	}
	return a.Seq > b.Seq
}

// rowHeap is a min-heap of rows by surprise: its root is the least
// surprising row kept.
type rowHeap []Row

func (h rowHeap) Len() int           { return len(h) }
func (h rowHeap) Less(i, j int) bool { return less(h[i], h[j]) }
func (h rowHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *rowHeap) Push(x any)        { *h = append(*h, x.(Row)) }
func (h *rowHeap) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
}
