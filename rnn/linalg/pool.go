package linalg

import (
	"runtime"
	"sync"
	"sync/atomic"
)

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
	workers []*worker
	pending atomic.Int64  // parts handed to workers and not yet done
	waiting atomic.Uint64 // number of the call whose caller is parked on done, 0 for none
	calls   uint64        // calls run so far, guarded by mu
	done    chan struct{}
	once    sync.Once
	loop1   forJob // the running For call, guarded by mu
}

// A worker spins for up to spinLimit polls after each part, so that the
// back-to-back products of a time-step loop find it awake, then parks on its
// wake channel.
type worker struct {
	seq      atomic.Uint64 // number of tasks posted
	task     task          // written by the caller before seq is bumped
	sleeping atomic.Bool
	wake     chan struct{}
}

// spinLimit is the number of polls (roughly 50-100µs) a worker makes for
// its next part, and the caller for the workers to finish, before parking.
// Measured on 2 idle cores, parking the caller after a few µs instead
// dropped the 2-thread 32×256×1024 product from about 315 to 180 GFLOP/s;
// the spin costs on machines with more runnable threads than cores.
const spinLimit = 1 << 16

// runner is a kernel call split into numbered parts.
type runner interface{ runPart(part int) }

type task struct {
	r    runner // nil tells the worker to exit
	part int
	call uint64 // the number of the call the part belongs to
}

// NewPool returns a pool of n threads (n <= 0 means 1).
func NewPool(n int) *Pool {
	if n < 1 {
		n = 1
	}
	p := &Pool{threads: n, workers: make([]*worker, n-1), done: make(chan struct{}, 1)}
	for i := range p.workers {
		w := &worker{wake: make(chan struct{}, 1)}
		p.workers[i] = w
		go p.loop(w)
	}
	return p
}

func (p *Pool) loop(w *worker) {
	var last uint64
	for {
		for spins := 0; w.seq.Load() == last; spins++ {
			if spins&1023 == 1023 {
				runtime.Gosched()
			}
			if spins < spinLimit {
				continue
			}
			w.sleeping.Store(true)
			if w.seq.Load() != last {
				if !w.sleeping.CompareAndSwap(true, false) {
					<-w.wake // the caller saw us asleep and sent a token
				}
				break
			}
			<-w.wake
			spins = 0
		}
		last++
		t := w.task
		if t.r == nil {
			return
		}
		t.r.runPart(t.part)
		// Only the caller of this very call may be signalled: a worker
		// preempted between the decrement and this check must not wake
		// the caller of a later call, which would return before its own
		// parts are done.
		left := p.pending.Add(-1)
		if testHookPartDone != nil {
			testHookPartDone(p, t.call)
		}
		if left == 0 && p.waiting.Load() == t.call && p.waiting.CompareAndSwap(t.call, 0) {
			p.done <- struct{}{}
		}
	}
}

// testHookPartDone, when set by a test, runs in a worker between the
// decrement of pending and the check whether to signal the caller.
var testHookPartDone func(p *Pool, call uint64)

// post hands a task to w and wakes it if it is parked.
func (w *worker) post(t task) {
	w.task = t
	w.seq.Add(1)
	if w.sleeping.Load() && w.sleeping.CompareAndSwap(true, false) {
		w.wake <- struct{}{}
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
		for _, w := range p.workers {
			w.post(task{})
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
	p.runLocked(r, parts)
}

// runLocked is run for a caller that holds p.mu, with 2 ≤ parts ≤
// p.Threads().
func (p *Pool) runLocked(r runner, parts int) {
	p.calls++
	call := p.calls
	p.pending.Store(int64(parts - 1))
	for i := 1; i < parts; i++ {
		p.workers[i-1].post(task{r: r, part: i, call: call})
	}
	r.runPart(0)
	// Wait for the workers: spin (they usually finish within microseconds
	// of the caller), then park until the last one signals.
	for spins := 1; p.pending.Load() != 0; spins++ {
		if spins&255 == 0 {
			runtime.Gosched()
		}
		if spins < spinLimit {
			continue
		}
		p.waiting.Store(call)
		if p.pending.Load() == 0 {
			if !p.waiting.CompareAndSwap(call, 0) {
				<-p.done // a worker saw us waiting and sent
			}
			break
		}
		<-p.done
		break
	}
}
