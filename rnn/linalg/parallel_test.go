package linalg

import (
	"sync/atomic"
	"testing"
)

// countRanger counts how often each index is visited and records whether
// every range started on a multiple of grain.
type countRanger struct {
	seen    []atomic.Int32
	grain   int
	ragged  atomic.Bool
	ranges  atomic.Int32
	wantLen int
}

func (r *countRanger) Range(lo, hi int) {
	r.ranges.Add(1)
	if lo%r.grain != 0 || lo >= hi || hi > r.wantLen {
		r.ragged.Store(true)
	}
	for i := lo; i < hi; i++ {
		r.seen[i].Add(1)
	}
}

// TestPoolFor checks that For visits every index of [0, n) exactly once, in
// ranges that start on multiples of grain, with at most one range per
// thread and one range when the loop has fewer than two chunks.
func TestPoolFor(t *testing.T) {
	pools := []*Pool{nil, NewPool(1), NewPool(2), NewPool(3)}
	defer func() {
		for _, p := range pools {
			p.Close()
		}
	}()
	cases := []struct{ n, grain int }{{1, 1}, {7, 1}, {7, 3}, {32, 32}, {33, 32}, {100, 7}, {1000, 0}, {5, 10}}
	for _, p := range pools {
		for _, c := range cases {
			grain := max(c.grain, 1)
			r := &countRanger{seen: make([]atomic.Int32, c.n), grain: grain, wantLen: c.n}
			p.For(c.n, c.grain, r)
			for i := range r.seen {
				if got := r.seen[i].Load(); got != 1 {
					t.Fatalf("threads=%d n=%d grain=%d: index %d visited %d times, want 1", p.Threads(), c.n, c.grain, i, got)
				}
			}
			if r.ragged.Load() {
				t.Errorf("threads=%d n=%d grain=%d: a range did not start on a multiple of grain", p.Threads(), c.n, c.grain)
			}
			chunks := (c.n + grain - 1) / grain
			wantMax := min(p.Threads(), chunks)
			if got := int(r.ranges.Load()); got > wantMax || got < 1 {
				t.Errorf("threads=%d n=%d grain=%d: got %d ranges, want 1..%d", p.Threads(), c.n, c.grain, got, wantMax)
			}
		}
	}
	// n = 0 calls nothing.
	r := &countRanger{grain: 1}
	pools[2].For(0, 1, r)
	if got := r.ranges.Load(); got != 0 {
		t.Errorf("n=0: got %d ranges, want 0", got)
	}
}

// sumRanger writes dst[i] = a[i]·a[i] + 1.
type sumRanger struct{ dst, a []float32 }

func (r *sumRanger) Range(lo, hi int) {
	for i := lo; i < hi; i++ {
		r.dst[i] = r.a[i]*r.a[i] + 1
	}
}

// TestPoolForNoAllocs checks that For allocates nothing per call.
func TestPoolForNoAllocs(t *testing.T) {
	p := NewPool(2)
	defer p.Close()
	r := &sumRanger{dst: make([]float32, 4096), a: make([]float32, 4096)}
	var body Ranger = r
	allocs := testing.AllocsPerRun(50, func() { p.For(4096, 256, body) })
	if allocs != 0 {
		t.Errorf("got %v allocations per For, want 0", allocs)
	}
	for i, v := range r.dst {
		if v != 1 {
			t.Fatalf("dst[%d] got %v want 1", i, v)
		}
	}
}
