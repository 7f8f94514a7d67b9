//go:build !(linux || darwin || freebsd || netbsd || openbsd || dragonfly)

package runs

// lockDir uses the portable exclusive-create lock where flock(2) is not
// available.
func lockDir(dir string, me Holder) (*DirLock, error) { return lockExcl(dir, me) }
