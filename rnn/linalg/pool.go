package linalg

// Pool is a fixed set of worker goroutines that kernels split their output
// over. A nil *Pool is valid and runs everything on the caller.
type Pool struct {
	threads int
}

// NewPool returns a pool of n threads (n <= 0 means 1).
func NewPool(n int) *Pool {
	if n < 1 {
		n = 1
	}
	return &Pool{threads: n}
}

// Threads reports the number of threads, 1 for a nil pool.
func (p *Pool) Threads() int {
	if p == nil {
		return 1
	}
	return p.threads
}

// Close stops the workers. A closed pool must not be used again.
func (p *Pool) Close() {}
