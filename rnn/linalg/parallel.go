package linalg

// Ranger is the body of a loop over indices that Pool.For splits into
// ranges: Range(lo, hi) handles indices lo ≤ i < hi. For results that do
// not depend on the thread count, what Range computes for an index must
// not depend on lo and hi, only on the index: no reductions across indices.
type Ranger interface {
	Range(lo, hi int)
}

// For calls body.Range over disjoint ranges that together cover [0, n),
// in parallel on the pool's threads, and returns when all are done. The
// ranges are cut at multiples of grain (grain < 1 means 1): the indices are
// taken in chunks of grain, the last one shorter, and each thread gets a
// contiguous run of whole chunks, so a loop over rows of a matrix, with
// grain a number of rows, never splits a row. Fewer than two chunks, a nil
// pool or a single thread run everything on the caller as one range
// body.Range(0, n).
//
// For itself allocates nothing; keep body in a long-lived struct (a
// pointer to a local variable escapes to the heap at each call). body must
// not use p (no Gemm on p inside body): the pool runs one call at a time.
func (p *Pool) For(n, grain int, body Ranger) {
	if n <= 0 {
		return
	}
	if grain < 1 {
		grain = 1
	}
	chunks := (n + grain - 1) / grain
	parts := min(p.Threads(), chunks)
	if parts <= 1 {
		body.Range(0, n)
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.loop1 = forJob{body: body, n: n, grain: grain, chunks: chunks, parts: parts}
	p.runLocked(&p.loop1, parts)
	p.loop1 = forJob{}
}

// forJob is a For call split into parts; part t gets chunks
// [t·chunks/parts, (t+1)·chunks/parts).
type forJob struct {
	body                    Ranger
	n, grain, chunks, parts int
}

func (j *forJob) runPart(t int) {
	lo := t * j.chunks / j.parts * j.grain
	hi := min((t+1)*j.chunks/j.parts*j.grain, j.n)
	if lo < hi {
		j.body.Range(lo, hi)
	}
}
