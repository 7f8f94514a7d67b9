package runs

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"
	"time"
)

// The lock tests re-run the test binary as a child process that takes the
// lock; these variables tell it so.
const (
	childDirEnv  = "WEFT_CHECKPOINT_LOCK_DIR"
	childModeEnv = "WEFT_CHECKPOINT_LOCK_MODE" // "hold": until stdin closes; "die": exit without unlocking
)

// TestLockChildProcess is the child's body; it does nothing in a normal run.
func TestLockChildProcess(t *testing.T) {
	dir := os.Getenv(childDirEnv)
	if dir == "" {
		t.Skip("helper process for the lock tests")
	}
	l, err := Lock(dir)
	if err != nil {
		fmt.Println("error:", err)
		os.Exit(2)
	}
	fmt.Printf("locked %d\n", os.Getpid())
	if os.Getenv(childModeEnv) == "die" {
		os.Exit(3) // no Unlock: the kernel must drop the flock
	}
	io.Copy(io.Discard, os.Stdin)
	if err := l.Unlock(); err != nil {
		fmt.Println("error:", err)
		os.Exit(2)
	}
	os.Exit(0)
}

// startChild starts a child that locks dir and waits until it has.
func startChild(t *testing.T, dir, mode string) (*exec.Cmd, io.WriteCloser, int) {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestLockChildProcess$", "-test.count=1")
	cmd.Env = append(os.Environ(), childDirEnv+"="+dir, childModeEnv+"="+mode)
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	line, err := bufio.NewReader(stdout).ReadString('\n')
	pid, perr := strconv.Atoi(strings.TrimSpace(strings.TrimPrefix(line, "locked ")))
	if err != nil || perr != nil || !strings.HasPrefix(line, "locked ") {
		stdin.Close()
		cmd.Wait()
		t.Fatalf("child did not lock: %q %v", line, err)
	}
	if pid != cmd.Process.Pid {
		t.Fatalf("child says pid %d, exec says %d", pid, cmd.Process.Pid)
	}
	go io.Copy(io.Discard, stdout)
	return cmd, stdin, pid
}

func hostname(t *testing.T) string {
	h, err := os.Hostname()
	if err != nil || h == "" {
		return "unknown"
	}
	return h
}

// wantLocked checks that err reports dir held by pid on this host.
func wantLocked(t *testing.T, err error, dir string, pid int) {
	t.Helper()
	var le *LockedError
	if !errors.As(err, &le) || !errors.Is(err, ErrLocked) {
		t.Fatalf("got %v, want a *LockedError", err)
	}
	if le.Holder == nil || le.Holder.PID != pid || le.Holder.Host != hostname(t) {
		t.Fatalf("got holder %v, want pid %d on host %s", le.Holder, pid, hostname(t))
	}
	msg := err.Error()
	for _, want := range []string{dir, "pid " + strconv.Itoa(pid), "host " + hostname(t)} {
		if !strings.Contains(msg, want) {
			t.Errorf("message %q does not name %q", msg, want)
		}
	}
}

// lockFuncs runs each test with the platform lock and the portable one.
var lockFuncs = []struct {
	name string
	lock func(string) (*DirLock, error)
}{
	{"platform", Lock},
	{"portable", func(dir string) (*DirLock, error) {
		me := Holder{PID: os.Getpid(), Started: time.Now().UTC().Truncate(time.Second)}
		me.Host, _ = os.Hostname()
		if me.Host == "" {
			me.Host = "unknown"
		}
		return lockExcl(dir, me)
	}},
}

func TestLockSameProcess(t *testing.T) {
	for _, lf := range lockFuncs {
		t.Run(lf.name, func(t *testing.T) {
			dir := t.TempDir()
			l, err := lf.lock(dir)
			if err != nil {
				t.Fatal(err)
			}
			if l.TookOver != nil {
				t.Errorf("fresh lock reports a takeover of %v", l.TookOver)
			}
			b, err := os.ReadFile(Layout(dir).Lock())
			if h := parseHolder(b); err != nil || h == nil || h.PID != os.Getpid() {
				t.Errorf("lock file holds %q (%v), want our pid %d", b, err, os.Getpid())
			}
			_, err = lf.lock(dir)
			wantLocked(t, err, dir, os.Getpid())
			if err := l.Unlock(); err != nil {
				t.Fatal(err)
			}
			if err := l.Unlock(); err != nil {
				t.Errorf("second Unlock: %v", err)
			}
			if _, err := os.Stat(Layout(dir).Lock()); !errors.Is(err, os.ErrNotExist) {
				t.Errorf("lock file after Unlock: got %v, want it removed", err)
			}
			l2, err := lf.lock(dir)
			if err != nil {
				t.Fatalf("lock after Unlock: %v", err)
			}
			l2.Unlock()
		})
	}
}

func TestLockChild(t *testing.T) {
	dir := t.TempDir()
	cmd, stdin, pid := startChild(t, dir, "hold")
	_, err := Lock(dir)
	wantLocked(t, err, dir, pid)
	stdin.Close()
	if err := cmd.Wait(); err != nil {
		t.Fatalf("child: %v", err)
	}
	l, err := Lock(dir)
	if err != nil {
		t.Fatalf("lock after the child unlocked: %v", err)
	}
	defer l.Unlock()
	if l.TookOver != nil {
		t.Errorf("got takeover of %v after a clean unlock, want none", l.TookOver)
	}
}

// TestLockStale kills the holder without an Unlock (it exits with the lock
// held), then checks that the lock is taken over and the takeover reported.
func TestLockStale(t *testing.T) {
	dir := t.TempDir()
	cmd, stdin, pid := startChild(t, dir, "die")
	stdin.Close()
	if err := cmd.Wait(); err == nil || cmd.ProcessState.ExitCode() != 3 {
		t.Fatalf("child: got %v, want exit status 3", err)
	}
	for _, lf := range lockFuncs {
		t.Run(lf.name, func(t *testing.T) {
			// Restore the dead child's lock file for each variant.
			h := Holder{Host: hostname(t), PID: pid, Started: time.Now().UTC().Truncate(time.Second)}
			if err := os.WriteFile(Layout(dir).Lock(), encodeHolder(h), 0o644); err != nil {
				t.Fatal(err)
			}
			l, err := lf.lock(dir)
			if err != nil {
				t.Fatalf("stale lock not taken over: %v", err)
			}
			defer l.Unlock()
			if l.TookOver == nil || l.TookOver.PID != pid {
				t.Errorf("got takeover %v, want the dead child's pid %d", l.TookOver, pid)
			}
		})
	}
}

// TestLockPortableOtherHost checks that the portable lock does not take
// over a lock from another host, whose process it cannot check.
func TestLockPortableOtherHost(t *testing.T) {
	dir := t.TempDir()
	for _, tc := range []struct {
		name    string
		content []byte
		want    string
	}{
		{"other host", encodeHolder(Holder{Host: "elsewhere.example", PID: 4242}), "pid 4242 on host elsewhere.example; if that run is gone, remove"},
		{"unreadable", []byte("garbage"), "another process"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := os.WriteFile(Layout(dir).Lock(), tc.content, 0o644); err != nil {
				t.Fatal(err)
			}
			_, err := lockFuncs[1].lock(dir)
			if !errors.Is(err, ErrLocked) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got %v, want ErrLocked containing %q", err, tc.want)
			}
		})
	}
}
