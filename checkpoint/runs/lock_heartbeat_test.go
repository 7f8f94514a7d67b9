package runs

import (
	"errors"
	"os"
	"strings"
	"testing"
	"time"
)

// TestLockHeartbeat checks that a held lock rewrites its heartbeat while
// held, on both lock variants.
func TestLockHeartbeat(t *testing.T) {
	old := heartbeatEvery
	heartbeatEvery = 20 * time.Millisecond
	defer func() { heartbeatEvery = old }()
	for _, lf := range lockFuncs {
		t.Run(lf.name, func(t *testing.T) {
			dir := t.TempDir()
			l, err := lf.lock(dir)
			if err != nil {
				t.Fatal(err)
			}
			defer l.Unlock()
			if lf.name != "platform" { // lockExcl is called directly: no goroutine
				l.Beat(time.Now().Add(time.Hour))
			} else {
				// The goroutine's beat: backdate the file's heartbeat,
				// then wait for the goroutine to refresh it.
				l.Beat(time.Unix(0, 0))
				time.Sleep(10 * heartbeatEvery)
			}
			h, err := ReadHolder(dir)
			if err != nil || h == nil {
				t.Fatalf("ReadHolder: got %v, %v", h, err)
			}
			if h.Heartbeat.Before(h.Started) {
				t.Errorf("got heartbeat %v with start %v, want one refreshed since the start", h.Heartbeat, h.Started)
			}
			if h.PID != os.Getpid() {
				t.Errorf("got pid %d, want %d", h.PID, os.Getpid())
			}
		})
	}
}

// TestLockOtherHost checks that a lock file written on another host is
// never taken over by Lock (flock proves nothing across the hosts of a
// network file system), and that StealStale removes it only once its
// heartbeat is older than StaleAfter.
func TestLockOtherHost(t *testing.T) {
	now := time.Now().UTC().Truncate(time.Second)
	// The lock judges the heartbeat at the same instant as StealStale
	// below: with the real clock a second could pass in between, and the
	// ages the notes give would move by it.
	defer func(c func() time.Time) { clock = c }(clock)
	clock = func() time.Time { return now }
	for _, tc := range []struct {
		name      string
		heartbeat time.Time
		steal     bool // StealStale removes it
		note      string
	}{
		{"fresh heartbeat", now.Add(-time.Minute), false, "(last heartbeat 1m0s ago)"},
		{"just under the limit", now.Add(-StaleAfter + time.Second), false, "last heartbeat 9m59s ago"},
		{"stale heartbeat", now.Add(-StaleAfter - time.Minute), true, "take it over with --steal-stale (last heartbeat 11m0s ago, over the 10m0s limit)"},
	} {
		for _, lf := range lockFuncs {
			t.Run(tc.name+"/"+lf.name, func(t *testing.T) {
				dir := t.TempDir()
				h := Holder{Host: "node-b.cluster.example", PID: 777, Started: now.Add(-2 * StaleAfter), Heartbeat: tc.heartbeat}
				if err := os.WriteFile(Layout(dir).Lock(), encodeHolder(h), 0o644); err != nil {
					t.Fatal(err)
				}
				_, err := lf.lock(dir)
				if !errors.Is(err, ErrLocked) || !strings.Contains(err.Error(), "pid 777 on host node-b.cluster.example") {
					t.Fatalf("lock: got %v, want ErrLocked naming the other host's holder", err)
				}
				if !strings.Contains(err.Error(), tc.note) {
					t.Errorf("lock: got %q, want it to contain %q", err, tc.note)
				}
				prev, err := StealStale(dir, now)
				if !tc.steal {
					if !errors.Is(err, ErrNotStale) || !errors.Is(err, ErrLocked) {
						t.Fatalf("StealStale: got %v, want ErrNotStale", err)
					}
					if _, serr := os.Stat(Layout(dir).Lock()); serr != nil {
						t.Errorf("lock file gone after a refused steal: %v", serr)
					}
					return
				}
				if err != nil || prev == nil || prev.PID != 777 {
					t.Fatalf("StealStale: got %v, %v, want the holder pid 777", prev, err)
				}
				l, err := lf.lock(dir)
				if err != nil {
					t.Fatalf("lock after the steal: %v", err)
				}
				l.Unlock()
			})
		}
	}
}

// TestStealStaleNothing checks that StealStale leaves alone what it must:
// no lock file, and a lock file of this host.
func TestStealStaleNothing(t *testing.T) {
	dir := t.TempDir()
	if h, err := StealStale(dir, time.Now()); h != nil || err != nil {
		t.Errorf("no lock file: got %v, %v, want nil, nil", h, err)
	}
	l, err := Lock(dir)
	if err != nil {
		t.Fatal(err)
	}
	defer l.Unlock()
	if h, err := StealStale(dir, time.Now().Add(24*time.Hour)); h != nil || err != nil {
		t.Errorf("this host's lock: got %v, %v, want nil, nil", h, err)
	}
	if _, err := os.Stat(l.Path()); err != nil {
		t.Errorf("this host's lock file removed: %v", err)
	}
}
