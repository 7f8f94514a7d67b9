package data

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"reflect"
	"testing"
)

func seq(n int) []int {
	s := make([]int, n)
	for i := range s {
		s[i] = i
	}
	return s
}

// TestBatchLayout checks the windows on a worked example: 23 tokens 0..22
// in B=2 streams give L = (23−1)/2 = 11 inputs per stream; stream 0 is
// 0..10 (targets 1..11), stream 1 is 11..21 (targets 12..22). With T=4 the
// windows start at steps 0, 4, 8, the last one 3 steps long.
func TestBatchLayout(t *testing.T) {
	b, err := NewBatches(NewTokens(seq(23)), BatchOptions{Streams: 2, Steps: 4})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	want := []Batch{
		{B: 2, T: 4, Inputs: []int{0, 11, 1, 12, 2, 13, 3, 14}, Targets: []int{1, 12, 2, 13, 3, 14, 4, 15}},
		{B: 2, T: 4, Inputs: []int{4, 15, 5, 16, 6, 17, 7, 18}, Targets: []int{5, 16, 6, 17, 7, 18, 8, 19}},
		{B: 2, T: 3, Inputs: []int{8, 19, 9, 20, 10, 21}, Targets: []int{9, 20, 10, 21, 11, 22}},
	}
	for epoch := 0; epoch < 2; epoch++ {
		for i, w := range want {
			got, err := b.Next(ctx)
			if err != nil {
				t.Fatalf("epoch %d window %d: %v", epoch, i, err)
			}
			if !reflect.DeepEqual(got, w) {
				t.Errorf("epoch %d window %d:\ngot  %+v\nwant %+v", epoch, i, got, w)
			}
		}
		if _, err := b.Next(ctx); err != io.EOF {
			t.Fatalf("epoch %d: got %v at the end, want io.EOF", epoch, err)
		}
		if b.Epoch() != epoch+1 {
			t.Errorf("after epoch %d the counter is %d", epoch, b.Epoch())
		}
	}
}

func TestBatchTooSmall(t *testing.T) {
	// B·T+1 = 9 tokens fill one window; 8 do not.
	if _, err := NewBatches(NewTokens(seq(9)), BatchOptions{Streams: 2, Steps: 4}); err != nil {
		t.Errorf("9 tokens: %v", err)
	}
	_, err := NewBatches(NewTokens(seq(8)), BatchOptions{Streams: 2, Steps: 4})
	if !errors.Is(err, ErrTooSmall) {
		t.Errorf("8 tokens: got %v, want ErrTooSmall", err)
	}
	for _, o := range []BatchOptions{{Streams: 0, Steps: 1}, {Streams: 1, Steps: 0}, {Streams: 1, Steps: 1, Variation: 1}} {
		if _, err := NewBatches(NewTokens(seq(100)), o); err == nil {
			t.Errorf("%+v: no error", o)
		}
	}
}

func TestBatchVariation(t *testing.T) {
	opts := BatchOptions{Streams: 3, Steps: 20, Variation: 0.5, Seed: 9}
	b, err := NewBatches(NewTokens(seq(5000)), opts)
	if err != nil {
		t.Fatal(err)
	}
	lens := map[int]bool{}
	total := 0
	for {
		w, err := b.Next(context.Background())
		if err == io.EOF {
			break
		}
		// T_k in (T·(1−v), T] = (10, 20]; only the epoch's last window may be shorter.
		if w.T > 20 || (w.T <= 10 && total+w.T != b.StreamLen()) {
			t.Errorf("window of %d steps outside (10, 20]", w.T)
		}
		lens[w.T] = true
		total += w.T
	}
	if total != b.StreamLen() {
		t.Errorf("windows cover %d steps, want %d", total, b.StreamLen())
	}
	if len(lens) < 5 {
		t.Errorf("only %d distinct window lengths: variation not applied", len(lens))
	}
}

// TestCursorRoundTrip saves the cursor mid-epoch, restores it in new
// Batches (via binary and JSON), and checks the next windows are the same.
func TestCursorRoundTrip(t *testing.T) {
	ctx := context.Background()
	tokens := seq(3001)
	opts := BatchOptions{Streams: 4, Steps: 16, Variation: 0.3, Seed: 5}
	a, _ := NewBatches(NewTokens(tokens), opts)
	for i := 0; i < 60; i++ { // crosses an epoch end (L = 750, about 55 windows)
		if _, err := a.Next(ctx); err != nil && err != io.EOF {
			t.Fatal(err)
		}
	}
	cur := a.Cursor()
	bin, err := cur.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	js, _ := json.Marshal(cur)
	var fromBin, fromJSON Cursor
	if err := fromBin.UnmarshalBinary(bin); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(js, &fromJSON); err != nil {
		t.Fatal(err)
	}
	if fromBin != cur || fromJSON != cur {
		t.Fatalf("cursor %+v came back as %+v and %+v", cur, fromBin, fromJSON)
	}
	b, _ := NewBatches(NewTokens(tokens), opts)
	if err := b.SetCursor(fromBin); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 80; i++ {
		x, errA := a.Next(ctx)
		y, errB := b.Next(ctx)
		if errA != errB || !reflect.DeepEqual(x, y) {
			t.Fatalf("window %d after restore differs", i)
		}
	}
	if a.Epoch() != b.Epoch() || a.Epoch() < 2 {
		t.Errorf("epochs %d and %d", a.Epoch(), b.Epoch())
	}

	// A cursor from another shape or seed is refused.
	other, _ := NewBatches(NewTokens(tokens), BatchOptions{Streams: 4, Steps: 16, Variation: 0.3, Seed: 6})
	c := cur
	c.Window = 7
	c.Step = 7 * 16
	if err := other.SetCursor(c); err == nil {
		t.Error("cursor with steps that do not match the lengths was accepted")
	}
	if err := other.SetCursor(Cursor{Tokens: 10, Streams: 4, Steps: 16}); err == nil {
		t.Error("cursor for 10 tokens accepted")
	}
	for _, bad := range [][]byte{nil, {9}, {1, 0x80}, append(append([]byte{}, bin...), 0)} {
		if err := new(Cursor).UnmarshalBinary(bad); !errors.Is(err, ErrCorrupt) {
			t.Errorf("UnmarshalBinary(%v) = %v, want ErrCorrupt", bad, err)
		}
	}
}

func TestEvalStreams(t *testing.T) {
	// 10 tokens in 3 streams: lengths 4, 3, 3, in order.
	got, err := EvalStreams(seq(10), 3)
	if err != nil {
		t.Fatal(err)
	}
	want := [][]int{{0, 1, 2, 3}, {4, 5, 6}, {7, 8, 9}}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("got %v, want %v", got, want)
	}
	if _, err := EvalStreams(seq(5), 3); !errors.Is(err, ErrTooSmall) {
		t.Errorf("5 tokens in 3 streams: got %v, want ErrTooSmall", err)
	}
}
