package runs

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"weft/rnn"
)

// TestDescribe tells the state of runs that finished, were interrupted,
// failed, died while training, were only prepared, or predate outcome
// files (the frozen fixture).
func TestDescribe(t *testing.T) {
	dir := t.TempDir()
	r := tinyRun(t, dir)
	ctx := context.Background()

	finished := filepath.Join(dir, "finished")
	if _, _, err := train(t, ctx, r, finished, 20, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	interrupted := filepath.Join(dir, "interrupted")
	cctx, cancel := context.WithCancel(ctx)
	if _, _, err := train(t, cctx, r, interrupted, 20, TrainOptions{AfterStep: func(step int64, _ *rnn.Model[float32]) {
		if step == 7 {
			cancel()
		}
	}}); err != nil {
		t.Fatal(err)
	}
	failed := filepath.Join(dir, "failed")
	if _, _, err := train(t, ctx, r, failed, 12, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	// Resumed, it diverges at every step (a weight poisoned with NaN) until
	// the guard gives up.
	if _, _, err := train(t, ctx, r, failed, 30, TrainOptions{AfterStep: func(_ int64, net *rnn.Model[float32]) {
		net.Params()[1].Value[0] = float32(math.NaN())
	}}); err == nil {
		t.Fatal("a poisoned run trained")
	}
	prepared := filepath.Join(dir, "prepared")
	d, err := Open(prepared)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := d.WriteRunFile(r); err != nil {
		t.Fatal(err)
	}
	if _, err := Prepare(ctx, r, d, nil); err != nil {
		t.Fatal(err)
	}
	d.Close()
	// A training outcome whose process is gone: a pid that cannot exist.
	stale := filepath.Join(dir, "stale")
	if _, _, err := train(t, ctx, r, stale, 5, TrainOptions{}); err != nil {
		t.Fatal(err)
	}
	host, _ := os.Hostname()
	b, _ := json.Marshal(Outcome{FileHeader: outcomeHeader, State: StateTraining, Host: host, PID: 1 << 30, Time: time.Now()})
	if err := os.WriteFile(Layout(stale).File(OutcomeFile), b, 0o644); err != nil {
		t.Fatal(err)
	}

	for _, tc := range []struct {
		dir, state, reason string
		step               int64
	}{
		{finished, StateFinished, "step budget reached", 20},
		{interrupted, StateInterrupted, "interrupted", 7},
		{failed, StateFailed, "did not recover", 13}, // the step the last try reached
		{prepared, StatePrepared, "", 0},
		{stale, StateStale, "", 5},
		{fixture, StateFinished, "step budget reached", 20},
	} {
		s, err := Describe(tc.dir)
		if err != nil {
			t.Fatalf("%s: %v", tc.dir, err)
		}
		if s.State != tc.state || !strings.Contains(s.Reason, tc.reason) || s.Step != tc.step {
			t.Errorf("%s: got %s (%q) at step %d, want %s (%q) at %d", filepath.Base(tc.dir), s.State, s.Reason, s.Step, tc.state, tc.reason, tc.step)
		}
	}
	s, _ := Describe(finished)
	if s.BestStep != 20 || !(s.BestBitsPerChar > 0) || s.Host != host || s.PID != os.Getpid() {
		t.Errorf("finished run: %+v", s)
	}
	got, err := Find(dir, 2)
	if err != nil {
		t.Fatal(err)
	}
	want := []string{failed, finished, interrupted, prepared, stale}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Find: got %v, want %v", got, want)
	}
	if _, err := Describe(dir); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("a folder that is not a run: got %v, want not-exist", err)
	}
}
