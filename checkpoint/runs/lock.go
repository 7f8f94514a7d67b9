package runs

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"time"
)

// ErrLocked is wrapped by the error Lock returns when another live process
// holds the directory; errors.As gives the *LockedError with the holder.
var ErrLocked = errors.New("run directory in use")

// Holder identifies the process that holds a run directory. The lock file
// holds it as JSON.
type Holder struct {
	Host    string    `json:"host"`
	PID     int       `json:"pid"`
	Started time.Time `json:"started"`
}

// String gives "pid 1234 on host h (since 2026-12-01T19:18:52Z)".
func (h Holder) String() string {
	s := fmt.Sprintf("pid %d on host %s", h.PID, h.Host)
	if !h.Started.IsZero() {
		s += " (since " + h.Started.UTC().Format(time.RFC3339) + ")"
	}
	return s
}

// LockedError reports a run directory held by another process. Holder is
// nil when the lock file could not be read (the holder may be writing it).
type LockedError struct {
	Dir    string
	Holder *Holder
	// Note adds advice, e.g. how to clear a lock from another host.
	Note string
}

func (e *LockedError) Error() string {
	who := "another process (lock file not readable yet)"
	if e.Holder != nil {
		who = e.Holder.String()
	}
	s := fmt.Sprintf("run directory %q is in use by %s", e.Dir, who)
	if e.Note != "" {
		s += "; " + e.Note
	}
	return s
}

func (e *LockedError) Unwrap() error { return ErrLocked }

// DirLock is the exclusive hold of one process on a run directory.
type DirLock struct {
	// Held describes this process, as written to the lock file.
	Held Holder
	// TookOver is the previous holder when Lock took over a stale lock (its
	// process had died without unlocking), for the caller to report; nil
	// otherwise.
	TookOver *Holder

	path string
	file *os.File // open with flock held; nil for the portable lock or after Unlock
	held bool
}

// Lock takes the run directory dir for this process, writing the host, the
// process id and the start time to dir/lock. If a live process holds it,
// Lock fails at once with a *LockedError naming that holder; a stale lock,
// left by a process that died, is taken over and reported in TookOver.
//
// On Linux, macOS and the BSDs the lock is an flock(2) on the lock file:
// the kernel drops it when the holder exits, however it exits, so a lock
// that can be taken is stale by definition. Elsewhere the lock file is
// created exclusively and a leftover one counts as stale only when it names
// this host and a process that no longer exists.
//
// The lock is only as good as the file system's flock: local disks are
// fine; a network file system without lock support would let two hosts in.
func Lock(dir string) (*DirLock, error) {
	me := Holder{PID: os.Getpid(), Started: time.Now().UTC().Truncate(time.Second)}
	me.Host, _ = os.Hostname()
	if me.Host == "" {
		me.Host = "unknown"
	}
	l, err := lockDir(dir, me)
	if err != nil {
		return nil, err
	}
	return l, nil
}

// Unlock releases the directory and removes the lock file. Calling it again
// does nothing.
func (l *DirLock) Unlock() error {
	if !l.held {
		return nil
	}
	l.held = false
	err := os.Remove(l.path)
	if l.file != nil {
		if cerr := l.file.Close(); err == nil {
			err = cerr
		}
		l.file = nil
	}
	if err != nil {
		return fmt.Errorf("unlock %q: %w", l.path, err)
	}
	return nil
}

// Path returns the lock file's path.
func (l *DirLock) Path() string { return l.path }

func encodeHolder(h Holder) []byte {
	b, err := json.Marshal(h)
	if err != nil {
		panic("checkpoint: " + err.Error())
	}
	return append(b, '\n')
}

// parseHolder decodes a lock file's content; nil for empty or garbage.
func parseHolder(b []byte) *Holder {
	var h Holder
	if len(b) == 0 || json.Unmarshal(b, &h) != nil || h.PID <= 0 {
		return nil
	}
	return &h
}

// lockExcl is the portable lock: create the lock file exclusively; take
// over a leftover file only if it names this host and a dead process.
func lockExcl(dir string, me Holder) (*DirLock, error) {
	path := Layout(dir).Lock()
	var stale *Holder
	for range 3 {
		f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
		if err == nil {
			_, err = f.Write(encodeHolder(me))
			if serr := f.Sync(); err == nil {
				err = serr
			}
			if cerr := f.Close(); err == nil {
				err = cerr
			}
			if err != nil {
				os.Remove(path)
				return nil, fmt.Errorf("lock run directory %q: write %s: %w", dir, LockFile, err)
			}
			return &DirLock{Held: me, TookOver: stale, path: path, held: true}, nil
		}
		if !errors.Is(err, os.ErrExist) {
			return nil, fmt.Errorf("lock run directory %q: %w", dir, err)
		}
		b, err := os.ReadFile(path)
		if errors.Is(err, os.ErrNotExist) {
			continue // released meanwhile
		}
		if err != nil {
			return nil, fmt.Errorf("lock run directory %q: %w", dir, err)
		}
		prev := parseHolder(b)
		if prev == nil {
			return nil, &LockedError{Dir: dir, Note: "if no run uses it, remove " + path}
		}
		if prev.Host != me.Host {
			return nil, &LockedError{Dir: dir, Holder: prev, Note: "if that run is gone, remove " + path}
		}
		if processAlive(prev.PID) {
			return nil, &LockedError{Dir: dir, Holder: prev}
		}
		if err := os.Remove(path); err != nil && !errors.Is(err, os.ErrNotExist) {
			return nil, fmt.Errorf("lock run directory %q: remove stale lock: %w", dir, err)
		}
		stale = prev
	}
	return nil, &LockedError{Dir: dir, Note: "the lock file keeps changing"}
}
