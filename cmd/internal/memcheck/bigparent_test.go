package memcheck

import (
	"runtime"
	"strconv"
	"testing"
)

// TestRunBigParent: a small child of a parent that has held 300 MiB must
// not read as 300 MiB. On Linux, os/exec starts children with
// CLONE_VFORK|CLONE_VM, and execve(2) folds the high-water mark of the
// memory it leaves (the parent's, shared until then) into the child's
// ru_maxrss (exec_mmap in the kernel's fs/exec.c calls
// setmax_mm_hiwater_rss on the old mm).
func TestRunBigParent(t *testing.T) {
	skipUnderRace(t)
	if runtime.GOOS != "linux" {
		t.Skip("the inherited high-water mark is a Linux matter")
	}
	big := make([]byte, 300<<20)
	for i := 0; i < len(big); i += 4096 {
		big[i] = 1
	}
	const n = 20 << 20
	p, err := Run(childCmd(t, "anon", strconv.Itoa(n)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	runtime.KeepAlive(big)
	t.Logf("%+v", p)
	if p.MaxRSS < n || p.MaxRSS > n+64<<20 {
		t.Errorf("max RSS %d bytes, want %d to %d: the child's own, not the parent's", p.MaxRSS, n, n+64<<20)
	}
}
