//go:build linux || darwin || freebsd || netbsd || openbsd || dragonfly

package runs

import (
	"errors"
	"fmt"
	"io"
	"os"
	"syscall"
)

// lockDir takes an flock(2) on dir/lock. The kernel releases it when the
// process exits, so content left in a lock file that can be locked is a
// stale holder's.
func lockDir(dir string, me Holder) (*DirLock, error) {
	path := Layout(dir).Lock()
	for range 10 {
		f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
		if err != nil {
			return nil, fmt.Errorf("lock run directory %q: %w", dir, err)
		}
		if err := flock(f); err != nil {
			b, _ := io.ReadAll(io.LimitReader(f, 4096))
			f.Close()
			if errors.Is(err, syscall.EWOULDBLOCK) {
				return nil, &LockedError{Dir: dir, Holder: parseHolder(b)}
			}
			return nil, fmt.Errorf("lock run directory %q: flock %s: %w", dir, LockFile, err)
		}
		// An Unlock may have removed the file between our open and flock:
		// then we hold a lock on a file no longer in the directory. Retry.
		fst, err1 := f.Stat()
		pst, err2 := os.Stat(path)
		if err1 != nil || err2 != nil || !os.SameFile(fst, pst) {
			f.Close()
			continue
		}
		b, err := io.ReadAll(io.LimitReader(f, 4096))
		if err != nil {
			f.Close()
			return nil, fmt.Errorf("lock run directory %q: %s: %w", dir, LockFile, err)
		}
		// flock does not reach across the hosts of a network file
		// system: a holder on another host is judged by its heartbeat,
		// and never taken over here (StealStale does that).
		if prev := parseHolder(b); prev != nil && prev.Host != me.Host {
			f.Close()
			return nil, otherHostError(dir, prev, clock())
		}
		err = writeHolder(f, me)
		if err != nil {
			f.Close()
			return nil, fmt.Errorf("lock run directory %q: %s: %w", dir, LockFile, err)
		}
		return &DirLock{Held: me, TookOver: parseHolder(b), path: path, file: f, held: true}, nil
	}
	return nil, &LockedError{Dir: dir, Note: "the lock file keeps changing"}
}

func flock(f *os.File) error {
	for {
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
		if err != syscall.EINTR {
			return err
		}
	}
}

func writeHolder(f *os.File, h Holder) error {
	if err := f.Truncate(0); err != nil {
		return err
	}
	if _, err := f.WriteAt(encodeHolder(h), 0); err != nil {
		return err
	}
	return f.Sync()
}
