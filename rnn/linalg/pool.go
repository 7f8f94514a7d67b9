package linalg

import "sync"

// Pool is a fixed set of worker goroutines that kernels split their output
// over. A nil *Pool is valid and runs everything on the caller. A Pool may be
// shared by several goroutines; their calls take turns.
//
// A kernel called with a pool of n threads runs one part on the calling
// goroutine and the other n−1 on the workers, which are started by NewPool
// and live until Close. No goroutine is started per call.
type Pool struct {
	threads int
	mu      sync.Mutex // one kernel call at a time
	work    []chan task
	done    sync.WaitGroup
	once    sync.Once
}

// runner is a kernel call split into numbered parts.
type runner interface{ runPart(part int) }

type task struct {
	r    runner
	part int
}

// NewPool returns a pool of n threads (n <= 0 means 1).
func NewPool(n int) *Pool {
	if n < 1 {
		n = 1
	}
	p := &Pool{threads: n, work: make([]chan task, n-1)}
	for i := range p.work {
		ch := make(chan task)
		p.work[i] = ch
		go p.worker(ch)
	}
	return p
}

func (p *Pool) worker(ch chan task) {
	for t := range ch {
		t.r.runPart(t.part)
		p.done.Done()
	}
}

// Threads reports the number of threads, 1 for a nil pool.
func (p *Pool) Threads() int {
	if p == nil {
		return 1
	}
	return p.threads
}

// Close stops the workers. A closed pool must not be used again. Close on a
// nil pool, or a second Close, does nothing.
func (p *Pool) Close() {
	if p == nil {
		return
	}
	p.once.Do(func() {
		p.mu.Lock()
		defer p.mu.Unlock()
		for _, ch := range p.work {
			close(ch)
		}
	})
}

// run calls r.runPart(i) for i in [0, parts), part 0 on the caller and the
// others on the workers, and returns when all are done. parts must not
// exceed p.Threads().
func (p *Pool) run(r runner, parts int) {
	if parts <= 1 || p == nil {
		for i := 0; i < parts; i++ {
			r.runPart(i)
		}
		return
	}
	if parts > p.threads {
		panic("linalg: more parts than threads")
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.done.Add(parts - 1)
	for i := 1; i < parts; i++ {
		p.work[i-1] <- task{r: r, part: i}
	}
	r.runPart(0)
	p.done.Wait()
}
