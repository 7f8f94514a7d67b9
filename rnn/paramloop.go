package rnn

import (
	"math"

	"weft/rnn/linalg"
)

// paramLoop is an elementwise pass over every element of a list of
// parameters, taken as one vector (the parameters one after another, in
// list order), that Pool.For splits into ranges of that vector: the
// optimizer update, gradient scaling and clamping, and the partial sums of
// the global gradient norm. Every element gets the arithmetic of a loop on
// one thread, and the norm is summed in chunks of normChunk elements whose
// bounds do not depend on the split, so every pass gives the same bits on
// any number of threads.
type paramLoop[T Float] struct {
	params []Param[T]
	offs   []int // offs[i]: index of params[i]'s first element; offs[len(params)] the total

	pass  paramPass
	upd   elemUpdater // paramUpdate: the optimizer
	scale T           // paramScale
	limit T           // paramClamp
	sums  []float64   // paramSquares: one sum per chunk
}

type paramPass uint8

const (
	paramUpdate  paramPass = iota // upd.update over the range
	paramScale                    // Grad *= scale
	paramClamp                    // Grad = clamp(Grad, -limit, limit)
	paramSquares                  // sums[c] = Σ Grad² over chunk c (ranges are chunk numbers)
)

// elemUpdater is an optimizer's per-element rule: update elements [i0, i1)
// of parameter pi with the coefficients of the current step.
type elemUpdater interface {
	update(pi, i0, i1 int)
}

// Grains of the passes: Pool.For does not hand a thread fewer elements,
// about 10-40 µs of work on one core (an Adam update costs a few ns per
// element, a scaling well under one).
const (
	updateGrain = 1 << 13
	scaleGrain  = 1 << 15
)

// normChunk is the number of elements summed in one partial sum of the
// global norm; the partial sums are then added in order.
const normChunk = 1 << 12

func newParamLoop[T Float](params []Param[T]) *paramLoop[T] {
	l := &paramLoop[T]{params: params, offs: make([]int, len(params)+1)}
	for i, p := range params {
		l.offs[i+1] = l.offs[i] + len(p.Grad)
	}
	l.sums = make([]float64, (l.total()+normChunk-1)/normChunk)
	return l
}

func (l *paramLoop[T]) total() int { return l.offs[len(l.params)] }

// run runs pass over every element on p's threads.
func (l *paramLoop[T]) run(p *linalg.Pool, pass paramPass) {
	l.pass = pass
	switch pass {
	case paramSquares:
		p.For(len(l.sums), max(1, scaleGrain/normChunk), l)
	case paramUpdate:
		p.For(l.total(), updateGrain, l)
	default:
		p.For(l.total(), scaleGrain, l)
	}
}

// Range implements linalg.Ranger.
func (l *paramLoop[T]) Range(lo, hi int) {
	if l.pass == paramSquares {
		for c := lo; c < hi; c++ {
			l.sums[c] = l.squares(c*normChunk, min((c+1)*normChunk, l.total()))
		}
		return
	}
	l.each(lo, hi)
}

// each runs the pass over elements [lo, hi) of the whole vector, one
// parameter's part at a time.
func (l *paramLoop[T]) each(lo, hi int) {
	pi := l.find(lo)
	for ; lo < hi; pi++ {
		start := l.offs[pi]
		i0, i1 := lo-start, min(hi, l.offs[pi+1])-start
		if i1 > i0 {
			switch l.pass {
			case paramUpdate:
				l.upd.update(pi, i0, i1)
			case paramScale:
				g := l.params[pi].Grad[i0:i1]
				for i := range g {
					g[i] *= l.scale
				}
			case paramClamp:
				g := l.params[pi].Grad[i0:i1]
				for i, v := range g {
					g[i] = min(max(v, -l.limit), l.limit)
				}
			}
		}
		lo = l.offs[pi+1]
	}
}

// squares returns Σ g² over elements [lo, hi) of the whole vector, in
// float64, in order.
func (l *paramLoop[T]) squares(lo, hi int) float64 {
	var ss float64
	for pi := l.find(lo); lo < hi; pi++ {
		start := l.offs[pi]
		for _, g := range l.params[pi].Grad[lo-start : min(hi, l.offs[pi+1])-start] {
			ss += float64(g) * float64(g)
		}
		lo = l.offs[pi+1]
	}
	return ss
}

// find returns the parameter holding element i (the first non-empty one
// starting at or after it).
func (l *paramLoop[T]) find(i int) int {
	lo, hi := 0, len(l.params)
	for lo < hi { // first pi with offs[pi+1] > i
		mid := (lo + hi) / 2
		if l.offs[mid+1] > i {
			hi = mid
		} else {
			lo = mid + 1
		}
	}
	return lo
}

// norm returns the global L2 norm of the gradients, √(Σ g²): the chunk
// sums, computed on p's threads, added in chunk order.
func (l *paramLoop[T]) norm(p *linalg.Pool) float64 {
	l.run(p, paramSquares)
	var ss float64
	for _, s := range l.sums {
		ss += s
	}
	return math.Sqrt(ss)
}

// clipNorm is ClipGlobalNorm on p's threads.
func (l *paramLoop[T]) clipNorm(p *linalg.Pool, maxNorm float64) float64 {
	norm := l.norm(p)
	if maxNorm > 0 && norm > maxNorm {
		l.scale = T(maxNorm / norm)
		l.run(p, paramScale)
	}
	return norm
}

// clipValue is ClipValue on p's threads.
func (l *paramLoop[T]) clipValue(p *linalg.Pool, limit float64) {
	if limit <= 0 {
		return
	}
	l.limit = T(limit)
	l.run(p, paramClamp)
}
