package runs

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"sync"
	"time"
)

// The heartbeat of a held lock. While a process holds a run directory it
// rewrites the heartbeat time in the lock file every HeartbeatEvery. A lock
// file written on another host whose last heartbeat is older than
// StaleAfter belongs to a run that has most likely died there (a crashed or
// powered-off node): StealStale removes it, which a scheduler's retry on a
// new node does with 'weft sweep run --steal-stale'. flock(2) does not reach
// across the hosts of a network file system, so the heartbeat is the only
// sign of life one host sees of another's run.
const (
	HeartbeatEvery = time.Minute
	StaleAfter     = 10 * time.Minute
)

// heartbeatEvery is HeartbeatEvery; tests shorten it.
var heartbeatEvery = HeartbeatEvery

// ErrLocked is wrapped by the error Lock returns when another live process
// holds the directory; errors.As gives the *LockedError with the holder.
var ErrLocked = errors.New("run directory in use")

// Holder identifies the process that holds a run directory. The lock file
// holds it as JSON.
type Holder struct {
	Host    string    `json:"host"`
	PID     int       `json:"pid"`
	Started time.Time `json:"started"`
	// Heartbeat is the last time the holder said it was alive (UTC, whole
	// seconds); zero in lock files written before heartbeats existed.
	Heartbeat time.Time `json:"heartbeat,omitzero"`
}

// LastSeen is the holder's last heartbeat, or its start time when it has
// written none.
func (h Holder) LastSeen() time.Time {
	if h.Heartbeat.After(h.Started) {
		return h.Heartbeat
	}
	return h.Started
}

// Alive reports whether the holder looks alive at now: on this host,
// whether its process exists; on another host, whose processes cannot be
// seen, whether its last heartbeat is younger than StaleAfter.
func (h Holder) Alive(now time.Time) bool {
	if h.Host == thisHost() {
		return processAlive(h.PID)
	}
	return now.Sub(h.LastSeen()) < StaleAfter
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

	mu       sync.Mutex    // guards file and Held.Heartbeat against the heartbeat goroutine
	stopBeat chan struct{} // closed by Unlock
	beatDone chan struct{} // closed when the heartbeat goroutine returns
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
// flock does not reach across the hosts of a network file system, so a
// lock file that names another host is never taken over on the strength of
// flock alone: while its heartbeat is younger than StaleAfter the holder is
// taken to be alive, and after that the lock is still refused until
// StealStale removes it. While held, the lock's heartbeat is refreshed
// every HeartbeatEvery by a goroutine that Unlock stops.
func Lock(dir string) (*DirLock, error) {
	me := Holder{PID: os.Getpid(), Started: time.Now().UTC().Truncate(time.Second)}
	me.Heartbeat = me.Started
	me.Host = thisHost()
	l, err := lockDir(dir, me)
	if err != nil {
		return nil, err
	}
	l.stopBeat, l.beatDone = make(chan struct{}), make(chan struct{})
	go l.heartbeat()
	return l, nil
}

func thisHost() string {
	h, _ := os.Hostname()
	if h == "" {
		h = "unknown"
	}
	return h
}

// heartbeat rewrites the lock file's heartbeat every heartbeatEvery until
// Unlock.
func (l *DirLock) heartbeat() {
	defer close(l.beatDone)
	t := time.NewTicker(heartbeatEvery)
	defer t.Stop()
	for {
		select {
		case <-l.stopBeat:
			return
		case now := <-t.C:
			l.Beat(now)
		}
	}
}

// Beat records now as the holder's heartbeat in the lock file. The
// heartbeat goroutine calls it; a failed write is left for the next beat
// (a holder that cannot write its lock file will look stale, which is
// what it is to other hosts).
func (l *DirLock) Beat(now time.Time) {
	l.mu.Lock()
	defer l.mu.Unlock()
	if !l.held {
		return
	}
	l.Held.Heartbeat = now.UTC().Truncate(time.Second)
	b := encodeHolder(l.Held)
	if l.file != nil {
		// Write over the old content, then cut to length: the times are
		// of fixed width, so a reader never sees a short file.
		if _, err := l.file.WriteAt(b, 0); err == nil {
			l.file.Truncate(int64(len(b)))
		}
		return
	}
	if f, err := os.OpenFile(l.path, os.O_WRONLY, 0); err == nil {
		if _, err := f.WriteAt(b, 0); err == nil {
			f.Truncate(int64(len(b)))
		}
		f.Close()
	}
}

// Unlock releases the directory and removes the lock file. Calling it again
// does nothing.
func (l *DirLock) Unlock() error {
	if l.stopBeat != nil {
		select {
		case <-l.stopBeat:
		default:
			close(l.stopBeat)
			<-l.beatDone
		}
	}
	l.mu.Lock()
	defer l.mu.Unlock()
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
			return nil, otherHostError(dir, prev, clock())
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

// clock is the time the lock judges heartbeats by; tests fix it.
var clock = time.Now

// otherHostError refuses a lock file written on another host, saying how
// old its heartbeat is and when it may be taken over.
func otherHostError(dir string, prev *Holder, now time.Time) *LockedError {
	note := "if that run is gone, remove " + Layout(dir).Lock()
	seen := prev.LastSeen()
	switch age := now.Sub(seen).Truncate(time.Second); {
	case seen.IsZero():
		note += " or take it over with --steal-stale (no heartbeat recorded)"
	case age >= StaleAfter:
		note += fmt.Sprintf(" or take it over with --steal-stale (last heartbeat %s ago, over the %s limit)", age, StaleAfter)
	default:
		note += fmt.Sprintf(" (last heartbeat %s ago)", age)
	}
	return &LockedError{Dir: dir, Holder: prev, Note: note}
}

// ReadHolder reads the holder recorded in the lock file of the run
// directory dir; nil, with no error, when there is no lock file or it holds
// nothing readable (it is being written, or was left empty).
func ReadHolder(dir string) (*Holder, error) {
	b, err := os.ReadFile(Layout(dir).Lock())
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("lock of run directory %q: %w", dir, err)
	}
	return parseHolder(b), nil
}

// ErrNotStale is wrapped by StealStale's error when the lock may not be
// taken over.
var ErrNotStale = errors.New("lock not stale")

// StealStale removes the lock file of the run directory dir when it was
// written on another host and its last heartbeat is at least StaleAfter
// before now, and returns the holder it named; the caller then locks the
// directory as usual. It returns nil and no error when there is no lock
// file, or one this host wrote (Lock itself takes over a dead local
// holder's lock). A lock from another host with a recent heartbeat is an
// error wrapping ErrNotStale and ErrLocked.
//
// Only a lock whose holder is really gone should be stolen: a holder that
// is alive but cut off from the file system for longer than StaleAfter
// would go on writing beside the new one.
func StealStale(dir string, now time.Time) (*Holder, error) {
	prev, err := ReadHolder(dir)
	if err != nil || prev == nil || prev.Host == thisHost() {
		return nil, err
	}
	if age := now.Sub(prev.LastSeen()); age < StaleAfter {
		return nil, &staleError{otherHostError(dir, prev, now)}
	}
	path := Layout(dir).Lock()
	// Check again just before removing: another process on this host may
	// have stolen and locked it meanwhile.
	again, err := ReadHolder(dir)
	if err != nil {
		return nil, err
	}
	if again == nil || *again != *prev {
		return nil, &staleError{&LockedError{Dir: dir, Holder: again, Note: "the lock file changed while being taken over"}}
	}
	if err := os.Remove(path); err != nil && !errors.Is(err, os.ErrNotExist) {
		return nil, fmt.Errorf("take over the lock of run directory %q: %w", dir, err)
	}
	return prev, nil
}

// staleError is StealStale's refusal: a *LockedError that also wraps
// ErrNotStale.
type staleError struct{ *LockedError }

func (e *staleError) Unwrap() []error { return []error{e.LockedError, ErrNotStale} }
