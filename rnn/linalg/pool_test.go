package linalg

import (
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// TestGemmThreadsBitIdentical checks the determinism guarantee: the same
// product gives the same bits with 1, 2, 3, 4, 16 and 64 threads, for every
// kernel and transpose, on shapes large enough to be split (m·n·k ≥
// parallelMinWork), split both ways (tall: rows, wide: columns), into many
// parts (the last three shapes: up to 64 parts by rows, by columns, and
// fewer tiles than threads), whatever the number of cores of the machine
// running the test.
func TestGemmThreadsBitIdentical(t *testing.T) {
	shapes := [][3]int{{67, 300, 129}, {33, 1030, 40}, {300, 17, 257}, {8, 4096, 33},
		{520, 260, 250}, {40, 2100, 410}, {30, 300, 4000}}
	pools := []*Pool{NewPool(2), NewPool(3), NewPool(4), NewPool(16), NewPool(64)}
	defer func() {
		for _, p := range pools {
			p.Close()
		}
	}()
	rng := rand.New(rand.NewPCG(21, 22))
	kernels := kernels32
	if testing.Short() {
		kernels = kernels[:1] // the race-detector run: the kernel Gemm uses
	}
	for _, kern := range kernels {
		for _, s := range shapes {
			if s[0]*s[1]*s[2] < parallelMinWork {
				t.Fatalf("shape %v below parallelMinWork: the test would not split it", s)
			}
			for op := 0; op < 4; op++ {
				tc := gemmCase{tA: op&1 != 0, tB: op&2 != 0, m: s[0], n: s[1], k: s[2], padA: 1, padC: 3, alpha: 0.75, beta: -1.5}
				o := newOperands[float32](tc, rng)
				want := append([]float32(nil), o.c...)
				gemmRun(nil, kern, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, float32(tc.beta), want, o.ldc)
				for _, p := range pools {
					got := append([]float32(nil), o.c...)
					gemmRun(p, kern, tc.tA, tc.tB, tc.m, tc.n, tc.k, float32(tc.alpha), o.a, o.lda, o.b, o.ldb, float32(tc.beta), got, o.ldc)
					for i := range got {
						if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
							t.Fatalf("%s %v threads=%d: C[%d] got %x want %x (1 thread)", kern.name, tc, p.Threads(), i, math.Float32bits(got[i]), math.Float32bits(want[i]))
						}
					}
				}
				// The result is also the right product (TestGemmKernels32
				// covers this in -short runs).
				if !testing.Short() {
					checkGemmResult(t, tc, o, want, eps32)
				}
			}
		}
	}
}

// TestGemmPlan checks how a product is split: never more parts than
// threads, than tiles along the split dimension, or than m·n·k/minPartWork
// (so a small product is not spread over every thread), and rows or
// columns as the plan documents. Tile counts are for the 8×32 tile.
func TestGemmPlan(t *testing.T) {
	kern := &kernel[float32]{name: "plan", mr: 8, nr: 32}
	cases := []struct {
		name      string
		threads   int
		m, n, k   int
		parts     int
		splitRows bool
	}{
		{"one thread", 1, 2048, 1024, 256, 1, false},
		{"below parallelMinWork", 16, 32, 96, 64, 1, false},
		// 32·1024·256 = 2^23 multiply-adds: 16 parts of 2^19.
		{"recurrent step, 2 threads", 2, 32, 1024, 256, 2, false},
		{"recurrent step, 16 threads", 16, 32, 1024, 256, 16, false},
		{"recurrent step, 64 threads", 64, 32, 1024, 256, 16, false},
		// 32·2048·512 = 2^25: worth 64 parts, but only 64 column tiles.
		{"large recurrent step, 64 threads", 64, 32, 2048, 512, 64, false},
		// 32·1024·64 = 2^21: 4 parts.
		{"small input product, 16 threads", 16, 32, 1024, 64, 4, false},
		{"tall output layer", 16, 2048, 96, 256, 16, true},
		// 30×300 has 4 row tiles and 10 column tiles: 10 parts by columns.
		{"fewer tiles than parts", 64, 30, 300, 4000, 10, false},
		// One tile of C: nothing to split.
		{"one tile", 64, 8, 32, 1 << 20, 1, false},
	}
	for _, c := range cases {
		j := &gemmJob[float32]{kern: kern, m: c.m, n: c.n, k: c.k}
		j.plan(c.threads)
		if j.parts != c.parts || (j.parts > 1 && j.splitRows != c.splitRows) {
			t.Errorf("%s: %d threads, %d×%d×%d: got %d parts (rows %v), want %d (rows %v)", c.name, c.threads, c.m, c.n, c.k, j.parts, j.splitRows, c.parts, c.splitRows)
		}
	}
}

// workspaceBarrier is a testHookWorkspace that holds every part of a
// product, with its workspace taken, until all parts of the product have
// taken theirs (arrivals count up from zero, parts per product, so reset
// arrived between products of different part counts): on any machine, even one with fewer cores than threads,
// the product then needs as many workspaces at once as it has parts, as on
// a machine with a core per thread.
type workspaceBarrier struct{ arrived atomic.Int64 }

func (wb *workspaceBarrier) wait(parts int) {
	n := wb.arrived.Add(1)
	target := ((n-1)/int64(parts) + 1) * int64(parts)
	for wb.arrived.Load() < target {
		runtime.Gosched()
	}
}

// TestGemmManyPackersNoAllocs is the regression test for issue 17: with
// more packers holding buffers at once than a fixed cache had slots (8),
// every product allocated the extra workspaces afresh (megabytes each),
// which on a 16-core server made training slower above 8 threads. With all
// parts forced to hold their workspace at once, a steady-state product
// must allocate nothing at 16, 32 and 64 threads, plain and packed, and the
// kernel must have made exactly one workspace per thread of the largest
// pool: memory grows by the per-thread scratch and no more.
func TestGemmManyPackersNoAllocs(t *testing.T) {
	wb := &workspaceBarrier{}
	testHookWorkspace = wb.wait
	defer func() { testHookWorkspace = nil }()
	// 2048·64·256 = 64·minPartWork multiply-adds, 2048 rows: 64 parts by
	// rows on 64 threads with any kernel (MR ≤ 8).
	const m, n, k = 2048, 64, 256
	a, b, c := make([]float32, m*k), make([]float32, n*k), make([]float32, m*n)
	for i := range a {
		a[i] = float32(i%7) - 3
	}
	for i := range b {
		b[i] = float32(i%5) - 2
	}
	// A kernel of its own, so that the workspaces counted are this test's.
	k32 := kernel32()
	kern := &kernel[float32]{name: k32.name, mr: k32.mr, nr: k32.nr, mc: k32.mc, kc: k32.kc, nc: k32.nc,
		micro: k32.micro, packA: k32.packA, packB: k32.packB}
	var pb PackedB
	PackB(&pb, true, k, n, b, k)
	pb.kern = kern
	var total int64
	for _, threads := range []int{16, 32, 64} {
		p := NewPool(threads)
		total += wb.arrived.Swap(0)
		j := &gemmJob[float32]{kern: kern, m: m, n: n, k: k}
		j.plan(threads)
		if j.parts != threads {
			p.Close()
			t.Fatalf("threads=%d: the product splits into %d parts, want %d: the test would not hold %d workspaces", threads, j.parts, threads, threads)
		}
		for _, packed := range []bool{false, true} {
			prod := func() {
				if packed {
					gemmPackedRun(p, &pb, false, m, 1, a, k, 0, c, n)
				} else {
					gemmRun(p, kern, false, true, m, n, k, 1, a, k, b, k, 0, c, n)
				}
			}
			prod() // the first product at this thread count makes the workspaces
			if allocs := testing.AllocsPerRun(3, prod); allocs != 0 {
				t.Errorf("threads=%d packed=%v: got %v allocations per product, want 0", threads, packed, allocs)
			}
			kern.spaces.mu.Lock()
			made, cached := kern.spaces.made, len(kern.spaces.free)
			kern.spaces.mu.Unlock()
			if made != threads || cached != threads {
				t.Errorf("threads=%d packed=%v: %d workspaces made, %d cached, want %d and %d (one per thread)", threads, packed, made, cached, threads, threads)
			}
		}
		p.Close()
	}
	if total+wb.arrived.Load() == 0 {
		t.Fatal("the workspace hook never ran: the test checked nothing")
	}
}

// TestPoolConcurrentCallers shares one pool between goroutines: calls take
// turns and each gets its own correct result.
func TestPoolConcurrentCallers(t *testing.T) {
	p := NewPool(2)
	defer p.Close()
	const m, n, k = 64, 256, 128
	a := make([]float32, m*k)
	b := make([]float32, k*n)
	for i := range a {
		a[i] = float32(i%7) - 3
	}
	for i := range b {
		b[i] = float32(i%5) - 2
	}
	want := make([]float32, m*n)
	Gemm(nil, false, false, m, n, k, 1, a, k, b, n, 0, want, n)
	var wg sync.WaitGroup
	errs := make(chan string, 4)
	for g := 0; g < 4; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			c := make([]float32, m*n)
			for rep := 0; rep < 20; rep++ {
				Gemm(p, false, false, m, n, k, 1, a, k, b, n, 0, c, n)
				for i := range c {
					if c[i] != want[i] {
						errs <- "concurrent Gemm on a shared pool gave a different result"
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Fatal(e)
	}
}

func TestPoolThreadsAndClose(t *testing.T) {
	var nilPool *Pool
	if got := nilPool.Threads(); got != 1 {
		t.Errorf("nil pool Threads: got %d want 1", got)
	}
	nilPool.Close() // must not panic
	for _, tc := range []struct{ n, want int }{{-1, 1}, {0, 1}, {1, 1}, {3, 3}} {
		p := NewPool(tc.n)
		if got := p.Threads(); got != tc.want {
			t.Errorf("NewPool(%d).Threads: got %d want %d", tc.n, got, tc.want)
		}
		p.Close()
		p.Close() // a second Close does nothing
	}
}

// TestGemmNoAllocs checks that a steady-state product allocates nothing,
// single- and multi-threaded (the engine calls Gemm every time step).
func TestGemmNoAllocs(t *testing.T) {
	p := NewPool(2)
	defer p.Close()
	const m, n, k = 32, 1024, 256
	a, b, c := make([]float32, m*k), make([]float32, k*n), make([]float32, m*n)
	for _, pool := range []*Pool{nil, p} {
		allocs := testing.AllocsPerRun(20, func() {
			Gemm(pool, false, true, m, n, k, 1, a, k, b, k, 0, c, n)
		})
		if allocs != 0 {
			t.Errorf("threads=%d: got %v allocations per Gemm, want 0", pool.Threads(), allocs)
		}
	}
}

// sleepyRunner sleeps in the worker's part, so that the caller parks, and
// records which parts ran.
type sleepyRunner struct {
	ran   []atomic.Bool
	sleep time.Duration
}

func (r *sleepyRunner) runPart(i int) {
	if i > 0 {
		time.Sleep(r.sleep)
	}
	r.ran[i].Store(true)
}

// TestPoolParking exercises both parking paths: a caller that finishes
// long before its worker, and workers idle long enough to park between
// calls.
func TestPoolParking(t *testing.T) {
	p := NewPool(3)
	defer p.Close()
	for rep := 0; rep < 3; rep++ {
		r := &sleepyRunner{ran: make([]atomic.Bool, 3), sleep: 5 * time.Millisecond}
		p.run(r, 3)
		for i := range r.ran {
			if !r.ran[i].Load() {
				t.Fatalf("rep %d: part %d did not run before run returned", rep, i)
			}
		}
		time.Sleep(20 * time.Millisecond) // workers park
	}
}

// TestCacheSurvivesGC: the packing-buffer cache keeps its objects through
// garbage collections (a sync.Pool would drop them), and never drops one:
// it holds as many as were ever put, more than the 8 slots of the fixed
// cache it replaced (issue 17).
func TestCacheSurvivesGC(t *testing.T) {
	var c cache[workspace[float32]]
	const n = 70
	ws := make([]*workspace[float32], n)
	for i := range ws {
		ws[i] = &workspace[float32]{}
		c.put(ws[i])
	}
	runtime.GC()
	runtime.GC()
	seen := map[*workspace[float32]]bool{}
	for range n {
		w := c.get()
		if w == nil {
			t.Fatalf("got nil from the cache after a collection and %d objects, want all %d objects put", len(seen), n)
		}
		seen[w] = true
	}
	if w := c.get(); w != nil {
		t.Errorf("got a %d-th object from a cache given %d", n+1, n)
	}
	if len(seen) != n {
		t.Errorf("got %d distinct objects, want %d", len(seen), n)
	}
}

// flagRunner records which parts ran.
type flagRunner struct{ ran [2]atomic.Bool }

func (r *flagRunner) runPart(i int) { r.ran[i].Store(true) }

// TestPoolLateWorkerSignal is the regression test for a lost part: a worker
// preempted between finishing its part of one call and checking whether
// that call's caller is parked used to wake the caller of the next call,
// which then returned before its own part had run (and, counts gone wrong,
// later hung: seen once in a 2-thread weft bench on a loaded machine). The
// hook holds the worker there past the caller's spin limit.
func TestPoolLateWorkerSignal(t *testing.T) {
	p := NewPool(2)
	defer p.Close()
	var once atomic.Bool
	testHookPartDone = func(hp *Pool, call uint64) {
		if hp == p && once.CompareAndSwap(false, true) {
			time.Sleep(50 * time.Millisecond) // far beyond the caller's spin
		}
	}
	first := &flagRunner{}
	p.run(first, 2)
	// The worker part of the second call takes long enough for an early
	// return to be seen.
	second := &sleepyRunner{ran: make([]atomic.Bool, 2), sleep: 20 * time.Millisecond}
	p.run(second, 2)
	if !second.ran[1].Load() {
		t.Fatal("the second call returned before its worker part ran")
	}
	third := &flagRunner{}
	p.run(third, 2) // and the pool still works
	if !third.ran[0].Load() || !third.ran[1].Load() {
		t.Fatal("third call: a part did not run")
	}
}
