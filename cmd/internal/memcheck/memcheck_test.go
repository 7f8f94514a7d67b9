package memcheck

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"testing"
	"time"
)

// The test binary acts as a child that holds a known amount of memory
// when MEMCHECK_TEST_CHILD names what to do: "anon N" allocates and
// touches N bytes of heap, "grow" allocates 16 MB more every 10 ms until
// killed, "map PATH" maps a file and reads every page of it.
const envChild = "MEMCHECK_TEST_CHILD"

func TestMain(m *testing.M) {
	if what := os.Getenv(envChild); what != "" {
		os.Exit(child(what, os.Getenv(envChild+"_ARG")))
	}
	os.Exit(m.Run())
}

var sink [][]byte

func child(what, arg string) int {
	switch what {
	case "anon":
		n, _ := strconv.Atoi(arg)
		b := make([]byte, n)
		for i := 0; i < n; i += 4096 {
			b[i] = 1
		}
		sink = append(sink, b)
		time.Sleep(200 * time.Millisecond)
	case "grow":
		for i := 0; i < 400; i++ {
			b := make([]byte, 16<<20)
			for j := 0; j < len(b); j += 4096 {
				b[j] = 1
			}
			sink = append(sink, b)
			time.Sleep(10 * time.Millisecond)
		}
	case "map":
		if err := readMapped(arg); err != nil {
			println(err.Error())
			return 1
		}
		time.Sleep(200 * time.Millisecond)
	}
	return 0
}

func childCmd(t *testing.T, what, arg string) *exec.Cmd {
	t.Helper()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe)
	cmd.Env = append(os.Environ(), envChild+"="+what, envChild+"_ARG="+arg)
	return cmd
}

// TestRunAnon: a child that holds 200 MB of heap shows a maximum resident
// set and (on Linux) a peak of anonymous memory of at least 200 MB, and not
// much more (the Go runtime and the test binary: under 64 MB).
func TestRunAnon(t *testing.T) {
	skipUnderRace(t)
	if runtime.GOOS != "linux" && runtime.GOOS != "darwin" {
		t.Skip("getrusage's maximum resident set is read on Linux and macOS")
	}
	const n = 200 << 20
	const slack = 64 << 20 // bytes: the runtime and the test binary
	p, err := Run(childCmd(t, "anon", strconv.Itoa(n)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("%+v", p)
	if p.MaxRSS < n || p.MaxRSS > n+slack {
		t.Errorf("max RSS %d bytes, want %d to %d", p.MaxRSS, n, n+slack)
	}
	if runtime.GOOS == "linux" {
		if p.Samples == 0 {
			t.Fatal("no sample of /proc/PID/status")
		}
		if p.PeakAnon < n || p.PeakAnon > n+slack {
			t.Errorf("peak anon %d bytes, want %d to %d", p.PeakAnon, n, n+slack)
		}
	} else if p.PeakAnon != -1 {
		t.Errorf("peak anon %d on %s, want -1 (not available)", p.PeakAnon, runtime.GOOS)
	}
	if p.Wall < 200*time.Millisecond {
		t.Errorf("wall %v, want at least the child's 200 ms sleep", p.Wall)
	}
}

// TestRunMapped: a child that reads a 128 MB file through a memory map has
// it in its maximum resident set but not in its anonymous memory: the
// distinction the bounded-memory checks rest on.
func TestRunMapped(t *testing.T) {
	skipUnderRace(t)
	if runtime.GOOS != "linux" {
		t.Skip("RssAnon is read from Linux's /proc")
	}
	const n = 128 << 20
	path := filepath.Join(t.TempDir(), "mapped")
	if err := os.WriteFile(path, make([]byte, n), 0o644); err != nil {
		t.Fatal(err)
	}
	p, err := Run(childCmd(t, "map", path), Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("%+v", p)
	if p.MaxRSS < n {
		t.Errorf("max RSS %d bytes, want at least the %d bytes mapped", p.MaxRSS, n)
	}
	if p.PeakAnon > 64<<20 {
		t.Errorf("peak anon %d bytes, want under 64 MiB: the mapped file is not anonymous memory", p.PeakAnon)
	}
}

// TestRunKill: a child that keeps growing is killed once it passes the
// limit, and Run says so.
func TestRunKill(t *testing.T) {
	skipUnderRace(t)
	if runtime.GOOS != "linux" {
		t.Skip("the limit is checked on Linux's /proc samples")
	}
	const limit = 256 << 20
	p, err := Run(childCmd(t, "grow", ""), Options{Limit: limit})
	if !errors.Is(err, ErrKilled) || !p.Killed {
		t.Fatalf("got error %v, killed %v; want ErrKilled", err, p.Killed)
	}
	// 16 MB every 10 ms, sampled every 20 ms: killed within a few samples.
	if p.PeakRSS < limit || p.MaxRSS > 2*limit {
		t.Errorf("sampled peak %d, max RSS %d: want past %d and killed before %d", p.PeakRSS, p.MaxRSS, limit, 2*limit)
	}
}

func TestParseSize(t *testing.T) {
	for _, c := range []struct {
		in   string
		want int64
	}{{"400MB", 400e6}, {"4GB", 4e9}, {"16kb", 16e3}, {"1000", 1000}, {"1.5 GB", 1.5e9}, {"7B", 7}, {"0", 0}} {
		got, err := ParseSize(c.in)
		if err != nil || got != c.want {
			t.Errorf("ParseSize(%q) = %d, %v; want %d", c.in, got, err, c.want)
		}
	}
	for _, bad := range []string{"", "MB", "-4MB", "4TB", "four"} {
		if _, err := ParseSize(bad); err == nil {
			t.Errorf("ParseSize(%q): no error", bad)
		}
	}
}

func TestFormatBytes(t *testing.T) {
	for _, c := range []struct {
		n    int64
		want string
	}{{0, "0 B"}, {999, "999 B"}, {1000, "1.00 kB"}, {42_100_000, "42.1 MB"}, {1_040_000_000, "1.04 GB"}, {10_600_000_000, "10.6 GB"}, {250e6, "250 MB"}} {
		if got := FormatBytes(c.n); got != c.want {
			t.Errorf("FormatBytes(%d) = %q, want %q", c.n, got, c.want)
		}
	}
}
