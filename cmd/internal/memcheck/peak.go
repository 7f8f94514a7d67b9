// Package memcheck measures the peak memory of weft's verbs run as child
// processes on a generated corpus: the harness behind `make memory-check`
// (the bounded-memory tests of cmd/weft) and testdata/memory-table.sh
// (issue 18's table of peak memory and time per verb and corpus size).
//
// Two figures are read for each child. MaxRSS is the largest resident set
// of the process, from getrusage(2) once it has exited: it counts every
// page the process held at once, including file-backed pages of a
// memory-mapped file, which the kernel may drop and read again at will.
// PeakAnon (Linux only) is the largest RssAnon of /proc/PID/status sampled
// every Interval while it runs: the anonymous memory (heap, stacks) that
// only swap could free, which is what bounded memory is about. Sampling can
// miss a spike shorter than the interval; MaxRSS cannot.
//
// One trap on Linux: os/exec starts a child with CLONE_VFORK|CLONE_VM, and
// execve(2) folds the high-water mark of the memory the child leaves, the
// parent's, into the child's ru_maxrss (exec_mmap in the kernel's
// fs/exec.c). A small child of a large parent (a test binary that has run
// other tests) then reads as large as its parent. So when getrusage's
// figure is not above the parent's own peak, MaxRSS is taken from VmHWM of
// /proc/PID/status instead (the high-water mark of the child's own memory
// after execve), as last sampled before the child exited, and
// MaxRSSSampled says so.
package memcheck

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"strconv"
	"sync"
	"time"
)

// Peak is what one child process used.
type Peak struct {
	MaxRSS     int64         `json:"max_rss_bytes"`          // from getrusage (or VmHWM: MaxRSSSampled); 0 when the system does not say
	PeakAnon   int64         `json:"peak_anon_bytes"`        // sampled RssAnon; -1 when not available (not Linux)
	PeakRSS    int64         `json:"peak_sampled_rss_bytes"` // sampled VmRSS; -1 when not available
	Samples    int           `json:"samples"`                // /proc samples taken
	Wall       time.Duration `json:"wall_ns"`                // from start to exit
	Killed     bool          `json:"killed_over_limit"`      // the sampled VmRSS passed Options.Limit and the child was killed
	LimitBytes int64         `json:"limit_bytes,omitempty"`  // Options.Limit
	// MaxRSSSampled says MaxRSS is the last sampled VmHWM, because
	// getrusage's figure was not above the parent's own peak (see the
	// package documentation).
	MaxRSSSampled bool `json:"max_rss_sampled"`
}

// Options tune Run.
type Options struct {
	// Interval between samples of /proc/PID/status; zero means 20 ms.
	Interval time.Duration
	// Limit kills the child when its sampled VmRSS passes this many bytes,
	// so that a check of a memory-hungry build does not starve a shared
	// machine; zero means no limit. Linux only.
	Limit int64
}

// Run starts cmd, samples its memory until it exits and returns the
// peaks. The error is cmd's (an *exec.ExitError when it failed); the peaks
// are filled in either way.
func Run(cmd *exec.Cmd, opts Options) (Peak, error) {
	if opts.Interval <= 0 {
		opts.Interval = 20 * time.Millisecond
	}
	p := Peak{PeakAnon: -1, PeakRSS: -1, LimitBytes: opts.Limit}
	start := time.Now()
	if err := cmd.Start(); err != nil {
		return p, err
	}
	done := make(chan struct{})
	var wg sync.WaitGroup
	var mu sync.Mutex
	var hwmSampled int64
	if procStatusReadable(cmd.Process.Pid) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			tick := time.NewTicker(opts.Interval)
			defer tick.Stop()
			for {
				anon, rss, hwm, ok := readStatus(cmd.Process.Pid)
				if ok {
					mu.Lock()
					p.Samples++
					hwmSampled = max(hwmSampled, hwm)
					p.PeakAnon = max(p.PeakAnon, anon)
					p.PeakRSS = max(p.PeakRSS, rss)
					if opts.Limit > 0 && rss > opts.Limit && !p.Killed {
						p.Killed = true
						cmd.Process.Kill()
					}
					mu.Unlock()
				}
				select {
				case <-done:
					return
				case <-tick.C:
				}
			}
		}()
	}
	err := cmd.Wait()
	p.Wall = time.Since(start)
	close(done)
	wg.Wait()
	if cmd.ProcessState != nil {
		p.MaxRSS = maxRSS(cmd.ProcessState)
	}
	if p.Samples > 0 && p.MaxRSS <= selfMaxRSS() {
		p.MaxRSS, p.MaxRSSSampled = max(hwmSampled, p.PeakRSS), true
	}
	if p.Killed {
		err = fmt.Errorf("%w: sampled resident set over %s", ErrKilled, FormatBytes(opts.Limit))
	}
	return p, err
}

// procStatusReadable says whether /proc/PID/status exists (Linux).
func procStatusReadable(pid int) bool {
	_, err := os.Stat(fmt.Sprintf("/proc/%d/status", pid))
	return err == nil
}

// readStatus reads RssAnon, VmRSS and VmHWM of pid from /proc/PID/status,
// in bytes (the file gives kB, meaning KiB: proc(5)).
func readStatus(pid int) (anon, rss, hwm int64, ok bool) {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0, 0, 0, false
	}
	var gotAnon, gotRSS bool
	sc := bufio.NewScanner(bytes.NewReader(b))
	for sc.Scan() {
		line := sc.Bytes()
		switch {
		case bytes.HasPrefix(line, []byte("RssAnon:")):
			anon, gotAnon = parseKB(line[len("RssAnon:"):])
		case bytes.HasPrefix(line, []byte("VmRSS:")):
			rss, gotRSS = parseKB(line[len("VmRSS:"):])
		case bytes.HasPrefix(line, []byte("VmHWM:")):
			hwm, _ = parseKB(line[len("VmHWM:"):])
		}
	}
	return anon, rss, hwm, gotAnon && gotRSS
}

// parseKB parses "   1234 kB" into bytes.
func parseKB(b []byte) (int64, bool) {
	f := bytes.Fields(b)
	if len(f) != 2 || string(f[1]) != "kB" {
		return 0, false
	}
	n, err := strconv.ParseInt(string(f[0]), 10, 64)
	if err != nil {
		return 0, false
	}
	return n << 10, true
}

// ErrKilled says a child was killed for passing the memory limit.
var ErrKilled = errors.New("killed for passing the memory limit")
