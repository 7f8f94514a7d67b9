package data

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
)

// BatchOptions shapes the training windows. The trainer fills it from
// training.batch_size, training.unroll_steps and training.seed.
type BatchOptions struct {
	// Streams is B, the number of parallel streams. Must be at least 1.
	Streams int

	// Steps is T, the number of time steps of a window. Must be at least 1.
	Steps int

	// Variation, from 0 to below 1, shortens windows at random: window k of
	// epoch e has T_k = T − floor(Variation·T·u) steps, u uniform in [0,1)
	// drawn from a hash of (Seed, e, k), so T_k lies in (T·(1−Variation), T]
	// and never exceeds T. Zero means every window has T steps.
	Variation float64

	// Seed seeds the window-length variation. Zero is a seed like any other.
	Seed uint64
}

// Batches yields the training windows: the tokens are cut into B contiguous
// streams of L = (N−1)/B inputs each (stream b starts at token b·L; its
// targets are the inputs shifted by one, so the last target of stream b is
// token b·L+L), and window after window walks the streams forward in
// lockstep, so the state a model reaches at the end of one window is the
// right start for the next. The last window of an epoch may be shorter than
// the others. Next returns io.EOF once at the end of each epoch; the call
// after that starts the next epoch from the start of the streams.
type Batches struct {
	tokens *Tokens
	window []int // one stream's window, read from tokens
	opts   BatchOptions
	l      int // inputs per stream
	cur    Cursor
}

// NewBatches lays tokens out as opts describes; each window reads its
// ids from tokens, so a split viewed in the token cache is never copied. It returns an error
// wrapping ErrTooSmall when the tokens do not fill one window of B streams
// of T steps (N ≥ B·T+1).
func NewBatches(tokens *Tokens, opts BatchOptions) (*Batches, error) {
	switch {
	case opts.Streams < 1:
		return nil, fmt.Errorf("batches: streams must be at least 1, got %d", opts.Streams)
	case opts.Steps < 1:
		return nil, fmt.Errorf("batches: steps must be at least 1, got %d", opts.Steps)
	case !(opts.Variation >= 0 && opts.Variation < 1):
		return nil, fmt.Errorf("batches: variation must be from 0 to below 1, got %v", opts.Variation)
	}
	l := 0
	if tokens.Len() > 0 {
		l = (tokens.Len() - 1) / opts.Streams
	}
	if l < opts.Steps {
		return nil, fmt.Errorf("training split: %w: %d tokens for %d streams of %d steps (need at least %d)",
			ErrTooSmall, tokens.Len(), opts.Streams, opts.Steps, opts.Streams*opts.Steps+1)
	}
	b := &Batches{tokens: tokens, opts: opts, l: l}
	b.cur = Cursor{Tokens: tokens.Len(), Streams: opts.Streams, Steps: opts.Steps}
	return b, nil
}

// StreamLen returns L, the number of inputs of each stream in an epoch.
func (b *Batches) StreamLen() int { return b.l }

// Epoch returns the number of epochs completed.
func (b *Batches) Epoch() int { return b.cur.Epoch }

// windowLen returns T_k for window k of epoch e (see BatchOptions).
func (b *Batches) windowLen(e, k int) int {
	t := b.opts.Steps
	if b.opts.Variation == 0 {
		return t
	}
	h := splitmix64(b.opts.Seed ^ splitmix64(uint64(e)<<32^uint64(k)))
	u := float64(h>>11) / (1 << 53)
	return t - int(b.opts.Variation*float64(t)*u)
}

// Next returns the next window, or io.EOF at the end of an epoch. The
// batch's slices are new at each call.
func (b *Batches) Next(ctx context.Context) (Batch, error) {
	if err := ctx.Err(); err != nil {
		return Batch{}, err
	}
	c := &b.cur
	if c.Step >= b.l {
		c.Epoch++
		c.Window, c.Step = 0, 0
		return Batch{}, io.EOF
	}
	t := min(b.windowLen(c.Epoch, c.Window), b.l-c.Step)
	nb := b.opts.Streams
	bt := Batch{B: nb, T: t, Inputs: make([]int, nb*t), Targets: make([]int, nb*t)}
	if cap(b.window) < t+1 {
		b.window = make([]int, t+1)
	}
	w := b.window[:t+1]
	for s := 0; s < nb; s++ {
		b.tokens.Read(w, s*b.l+c.Step)
		for i := 0; i < t; i++ {
			bt.Inputs[i*nb+s] = w[i]
			bt.Targets[i*nb+s] = w[i+1]
		}
	}
	c.Window++
	c.Step += t
	return bt, nil
}

// Cursor returns the position of the next window.
func (b *Batches) Cursor() Cursor { return b.cur }

// SetCursor moves to a position saved by Cursor, so that Next continues
// with exactly the window that followed it. The cursor must come from
// Batches over as many tokens with the same streams, steps, variation and
// seed.
func (b *Batches) SetCursor(c Cursor) error {
	if c.Tokens != b.tokens.Len() || c.Streams != b.opts.Streams || c.Steps != b.opts.Steps {
		return fmt.Errorf("batch cursor is for %d tokens in %d streams of %d steps, not %d tokens in %d streams of %d steps",
			c.Tokens, c.Streams, c.Steps, b.tokens.Len(), b.opts.Streams, b.opts.Steps)
	}
	if c.Epoch < 0 || c.Window < 0 || c.Step < 0 || c.Step > b.l {
		return fmt.Errorf("batch cursor out of range: epoch %d, window %d, step %d of %d", c.Epoch, c.Window, c.Step, b.l)
	}
	step := 0
	for k := 0; k < c.Window && step < b.l; k++ {
		step += min(b.windowLen(c.Epoch, k), b.l-step)
	}
	if step != c.Step {
		return fmt.Errorf("batch cursor does not match the window lengths: window %d of epoch %d starts at step %d, cursor says %d (different variation or seed?)",
			c.Window, c.Epoch, step, c.Step)
	}
	b.cur = c
	return nil
}

// A Cursor is the position of Batches: the epochs completed, the windows
// served in the current epoch and the step of each stream where the next
// window starts, with the shape it belongs to. It encodes as JSON or, by
// MarshalBinary, as a version byte and six unsigned varints.
type Cursor struct {
	Epoch   int `json:"epoch"`
	Window  int `json:"window"`
	Step    int `json:"step"`
	Tokens  int `json:"tokens"`
	Streams int `json:"streams"`
	Steps   int `json:"steps"`
}

const cursorVersion = 1

// MarshalBinary encodes the cursor.
func (c Cursor) MarshalBinary() ([]byte, error) {
	b := []byte{cursorVersion}
	for _, v := range []int{c.Epoch, c.Window, c.Step, c.Tokens, c.Streams, c.Steps} {
		if v < 0 {
			return nil, errors.New("batch cursor: negative field")
		}
		b = binary.AppendUvarint(b, uint64(v))
	}
	return b, nil
}

// UnmarshalBinary decodes a cursor written by MarshalBinary.
func (c *Cursor) UnmarshalBinary(b []byte) error {
	if len(b) == 0 || b[0] != cursorVersion {
		return fmt.Errorf("batch cursor: %w: unknown version", ErrCorrupt)
	}
	b = b[1:]
	var v [6]int
	for i := range v {
		x, n := binary.Uvarint(b)
		if n <= 0 || x > 1<<62 {
			return fmt.Errorf("batch cursor: %w: bad field %d", ErrCorrupt, i)
		}
		v[i] = int(x)
		b = b[n:]
	}
	if len(b) != 0 {
		return fmt.Errorf("batch cursor: %w: %d trailing bytes", ErrCorrupt, len(b))
	}
	*c = Cursor{Epoch: v[0], Window: v[1], Step: v[2], Tokens: v[3], Streams: v[4], Steps: v[5]}
	return nil
}
