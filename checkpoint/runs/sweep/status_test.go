package sweep

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
	"time"

	"weft/checkpoint/runs"
)

// TestStatus builds the files of each state by hand and checks what
// Status reads from them: nothing (pending), a checkpoint (partial), a
// held lock (running), a lock of a dead process of this host or one of
// another host with an old heartbeat (stale), a failed and a done outcome.
func TestStatus(t *testing.T) {
	dir := t.TempDir()
	sw, err := Load(writeSweep(t, dir, "base = \"base.toml\"\n[[axis]]\n\"training.seed\" = [1, 2, 3, 4, 5, 6, 7]\n"))
	if err != nil {
		t.Fatal(err)
	}
	p, err := sw.Plan(context.Background(), true)
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now()
	mkdir := func(i int, sub string) string {
		d := filepath.Join(sw.RunDir(p.Runs[i]), sub)
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		return d
	}
	writeLock := func(i int, h runs.Holder) {
		b, _ := json.Marshal(h)
		if err := os.WriteFile(runs.Layout(mkdir(i, "")).Lock(), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	// 1: partial, with a metrics log.
	ck := mkdir(1, runs.CheckpointsDir)
	os.WriteFile(filepath.Join(ck, "step-000000040.safetensors"), []byte("x"), 0o644)
	metrics := `{"version":1,"step":30,"epoch":0,"tokens":3000,"wall_seconds":2,"learning_rate":0.01,"val_bits_per_char":2.5}
{"version":1,"step":40,"epoch":0,"tokens":4000,"wall_seconds":4,"learning_rate":0.01,"val_bits_per_char":2.75}
`
	os.WriteFile(runs.Layout(sw.RunDir(p.Runs[1])).Metrics(), []byte(metrics), 0o644)
	// 2: running (this process holds it).
	l, err := runs.Lock(mkdir(2, ""))
	if err != nil {
		t.Fatal(err)
	}
	defer l.Unlock()
	// 3: a dead process of this host (2^30 is above Linux's largest
	// pid_max, 2^22).
	host, _ := os.Hostname()
	writeLock(3, runs.Holder{Host: host, PID: 1 << 30, Started: now.Add(-time.Minute)})
	// 4: another host, heartbeat an hour old; 5: another host, fresh.
	writeLock(4, runs.Holder{Host: "node-9.example", PID: 12, Started: now.Add(-2 * time.Hour), Heartbeat: now.Add(-time.Hour)})
	writeLock(5, runs.Holder{Host: "node-9.example", PID: 13, Started: now.Add(-2 * time.Hour), Heartbeat: now.Add(-time.Minute)})
	// 6: failed; 0: done.
	sw.writeRecord(p.Runs[6], Record{State: StateFailed, Message: "disk full"})
	sw.writeRecord(p.Runs[0], Record{State: StateDone, Steps: 100, BestBPC: 1.5})

	sts, err := sw.Status(p, now)
	if err != nil {
		t.Fatal(err)
	}
	want := []string{StateDone, StatePartial, StateRunning, StateStale, StateStale, StateRunning, StateFailed}
	for i, st := range sts {
		if st.State != want[i] {
			t.Errorf("run %d: got state %s, want %s", i, st.State, want[i])
		}
	}
	// Run 1's numbers: the newest step of checkpoints and log, the best
	// validation of the log, tokens over wall seconds (4000 / 4).
	if st := sts[1]; st.Step != 40 || st.BestBPC != 2.5 || st.TokensPerSec != 1000 {
		t.Errorf("run 1: got step %d, best %v, %v tokens/s, want 40, 2.5, 1000", st.Step, st.BestBPC, st.TokensPerSec)
	}
	if st := sts[0]; st.Step != 100 || st.BestBPC != 1.5 {
		t.Errorf("run 0: got step %d, best %v, want the outcome's 100, 1.5", st.Step, st.BestBPC)
	}
	if st := sts[5]; st.Host != "node-9.example" || st.Heartbeat.Sub(now.Add(-time.Minute)).Abs() > time.Second {
		t.Errorf("run 5: got host %s, heartbeat %v, want node-9.example a minute ago", st.Host, st.Heartbeat)
	}
	if st := sts[6]; st.Message != "disk full" {
		t.Errorf("run 6: got message %q, want the failure's", st.Message)
	}
}
