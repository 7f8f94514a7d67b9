package main

import (
	"context"
	"os"
	"strings"
	"testing"
	"time"

	"weft/cmd/internal/memcheck"
)

// The bounded-memory checks of issue 18: weft prepare, a few steps of weft
// train, weft baselines and weft eval run as child processes on a generated
// corpus (data/corpustest.Generate) at two sizes, and each process's peak
// memory is read (cmd/internal/memcheck). TestMemoryFlat runs in every
// `go test` (not -short) at small sizes and checks that the peaks do not
// grow with the corpus; TestMemoryBound is `make memory-check`, at sizes of
// hundreds of megabytes, and checks them against a fixed bound too.
//
// Environment:
//
//	WEFT_MEMCHECK=1            run TestMemoryBound (make memory-check sets it)
//	WEFT_MEMCHECK_SIZES        its two corpus sizes, default "100MB,400MB"
//	WEFT_MEMCHECK_SMALL        TestMemoryFlat's two sizes, default "4MB,16MB"
//	WEFT_MEMCHECK_BIN          a weft binary to measure (make memory-check: bin/weft);
//	                           default this test binary acting as weft
//	WEFT_MEMCHECK_BOUND        the fixed bound on peak anonymous memory, default 250MB
//	WEFT_MEMCHECK_TOLERANCE    the growth allowed from the smaller corpus to the larger,
//	                           default 24MB (TestMemoryFlat) and 32MB (TestMemoryBound)
//	WEFT_MEMCHECK_KILL         kill a verb whose resident set passes this, so that a
//	                           build that grows with the corpus fails fast instead of
//	                           starving the machine; default 4·bound + 3·corpus
const (
	envMemCheck     = "WEFT_MEMCHECK"
	envMemSizes     = "WEFT_MEMCHECK_SIZES"
	envMemSmall     = "WEFT_MEMCHECK_SMALL"
	envMemBin       = "WEFT_MEMCHECK_BIN"
	envMemBound     = "WEFT_MEMCHECK_BOUND"
	envMemTolerance = "WEFT_MEMCHECK_TOLERANCE"
	envMemKill      = "WEFT_MEMCHECK_KILL"
)

// memoryBound is the documented bound on each verb's peak anonymous memory
// (heap, stacks: what only swap could free) with memcheck.RunFile's tiny
// model and short baseline ladder, whatever the corpus size. What the verbs
// need besides the corpus, and so what the bound is made of:
//   - the Go runtime, the program's own data and the goroutine stacks:
//     under 40 MB (weft's peak anonymous memory on a 2 MB corpus today is
//     35 to 72 MB per verb, and that includes the 2 MB corpus about 25
//     times over);
//   - the model: under 4,000 parameters, ×4 bytes for the weights, the
//     gradients and Adam's two moments: 64 kB;
//   - the vocabulary: about 65 characters;
//   - the short ladder: at most 65³ = 274,625 trigram counts of the
//     generated text's alphabet (fewer occur), at about 50 bytes each in a
//     hash map: 14 MB at worst; the 8-state HMM's tables are tiny
//     and it reads at most 100,000 tokens;
//   - eval's bootstrap: one sum per block of 2,000 characters per row: for
//     a 400 MB corpus, 10,000 blocks × a dozen rows × 8 bytes = 1 MB;
//   - prepare's leakage report: a hash of each test line (the issue asks
//     for hashes of lines, not the lines), at most 48 bytes each in a hash
//     set: the 5% test split of a 400 MB corpus has about 330,000 lines of
//     the generated text, 16 MB (a set of every training line instead
//     would grow by 48 bytes a line, 235 MB from 100 MB to 400 MB, and
//     fail);
//   - reading and encoding buffers: a few megabytes.
//
// That is under 80 MB; the bound is three times that, since the Go
// collector lets the heap grow to twice the live data (GOGC=100) before it
// collects, and a new design may keep larger buffers. A token cache read through a memory map adds file-backed pages
// to the resident set, which the kernel may drop at will: they are not
// anonymous memory and are allowed for separately in the maximum resident
// set (memoryRSSBound).
const memoryBound = 250e6 // bytes

// memoryRSSBound is the bound on getrusage's maximum resident set, which
// counts file-backed pages too: memoryBound plus every byte the verb could
// have mapped, the corpus file and the run directory's files (token cache,
// vocabulary, reports) as they are after prepare.
func memoryRSSBound(bound int64, m memcheck.Measurement) int64 {
	return bound + m.CorpusBytes + m.RunDirBytes
}

// TestMemoryFlat checks that no verb's peak memory grows with the corpus:
// from WEFT_MEMCHECK_SMALL's smaller corpus to its larger (4 MB and 16 MB,
// 12 million characters more), each verb's peak anonymous memory (Linux;
// elsewhere the maximum resident set less the files it may map) may grow by
// at most the tolerance, 24 MB (decimal units throughout): 2 bytes per
// extra character, where the build of issue 18 measured 11 to 27. It is
// the quick check that CI runs; make memory-check's, 32 MB over 300 MB
// more corpus, is the strict one (a copy of the training split's token ids
// as uint16, 21.6 MB more here, passes this one and fails that one). The
// tolerance covers the collector's timing: five runs of the verbs on the
// same 4 MB corpus before issue 18 peaked within 4 MB of each other, except
// prepare once 25 MB and baselines once 8 MB above their other runs.
func TestMemoryFlat(t *testing.T) {
	if testing.Short() {
		t.Skip("runs weft on 20 MB of generated corpus; run without -short")
	}
	sizes := memSizes(t, envMemSmall, "4MB,16MB")
	tol := memEnvSize(t, envMemTolerance, 24e6)
	ms := measureSizes(t, sizes, memEnvSize(t, envMemKill, 0))
	checkFlat(t, ms, tol)
}

// TestMemoryBound is `make memory-check`: at WEFT_MEMCHECK_SIZES (100 MB
// and 400 MB by default) each verb's peak anonymous memory stays under
// memoryBound, its maximum resident set under memoryRSSBound, and neither
// peak grows from the smaller corpus to the larger by more than the
// tolerance (32 MB: 0.1 bytes per extra character at the default sizes).
func TestMemoryBound(t *testing.T) {
	if os.Getenv(envMemCheck) != "1" {
		t.Skip("the memory check at hundreds of megabytes: make memory-check (sets " + envMemCheck + "=1)")
	}
	sizes := memSizes(t, envMemSizes, "100MB,400MB")
	bound := memEnvSize(t, envMemBound, memoryBound)
	tol := memEnvSize(t, envMemTolerance, 32e6)
	ms := measureSizes(t, sizes, memEnvSize(t, envMemKill, 0))
	for _, m := range ms {
		for _, v := range m.Verbs {
			if v.Peak.PeakAnon > bound {
				t.Errorf("weft %s on %s of corpus: peak anonymous memory %s, want under %s whatever the corpus size (issue 18; memoryBound says what it covers)",
					v.Name, memcheck.FormatBytes(m.CorpusBytes), memcheck.FormatBytes(v.Peak.PeakAnon), memcheck.FormatBytes(bound))
			}
			if rb := memoryRSSBound(bound, m); v.Peak.MaxRSS > rb {
				t.Errorf("weft %s on %s of corpus: maximum resident set %s, want under %s (the bound %s plus the %s corpus and the %s run directory it may map)",
					v.Name, memcheck.FormatBytes(m.CorpusBytes), memcheck.FormatBytes(v.Peak.MaxRSS), memcheck.FormatBytes(rb),
					memcheck.FormatBytes(bound), memcheck.FormatBytes(m.CorpusBytes), memcheck.FormatBytes(m.RunDirBytes))
			}
		}
	}
	checkFlat(t, ms, tol)
}

// measureSizes runs the verbs at both sizes, logs the table, and stops the
// test when a verb failed at either size (a verb killed for passing the
// limit counts as failed). kill 0 means the default, 4·memoryBound plus 3
// bytes per byte of the larger corpus (the corpus and a token cache of 2
// bytes per character mapped whole, with room to spare).
func measureSizes(t *testing.T, sizes [2]int64, kill int64) [2]memcheck.Measurement {
	t.Helper()
	weft := []string{os.Getenv(envMemBin)}
	env := []string(nil)
	if weft[0] == "" {
		exe, err := os.Executable()
		if err != nil {
			t.Fatal(err)
		}
		weft = []string{exe}
		env = []string{envAsWeft + "=1"}
	}
	if kill == 0 {
		kill = 4*memoryBound + 3*sizes[1]
	}
	var ms [2]memcheck.Measurement
	for i, size := range sizes {
		dir := t.TempDir()
		start := time.Now()
		m, err := memcheck.Measure(context.Background(), memcheck.Setup{
			Weft: weft, Env: env, Dir: dir, Size: size, Seed: 1,
			Options: memcheck.Options{Limit: kill},
		})
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("%s of corpus (generated in %.1f s, run directory %s), all verbs in %.1f s:", memcheck.FormatBytes(size),
			m.Generate.Seconds(), memcheck.FormatBytes(m.RunDirBytes), time.Since(start).Seconds())
		for _, v := range m.Verbs {
			t.Logf("  %-9s max RSS %9s  peak anon %9s  %6.1f s", v.Name, memcheck.FormatBytes(v.Peak.MaxRSS), anonText(v.Peak.PeakAnon), v.Peak.Wall.Seconds())
		}
		if f := m.Failed(); f != nil {
			hint := ""
			if f.Peak.Killed {
				hint = "; memory must not grow with the corpus (issue 18), and a verb is stopped past " + envMemKill + " (default 4·bound + 3 bytes per corpus byte)"
			}
			t.Fatalf("%s of corpus: %s (max RSS %s, peak anon %s when it stopped)%s", memcheck.FormatBytes(size), f.Err,
				memcheck.FormatBytes(f.Peak.MaxRSS), anonText(f.Peak.PeakAnon), hint)
		}
		ms[i] = m
	}
	return ms
}

// checkFlat fails for every verb whose peak grew by more than tol from the
// smaller corpus to the larger.
func checkFlat(t *testing.T, ms [2]memcheck.Measurement, tol int64) {
	t.Helper()
	extra := ms[1].CorpusBytes - ms[0].CorpusBytes
	for _, name := range memcheck.VerbNames {
		a, b := ms[0].Verb(name), ms[1].Verb(name)
		fa, what := unmapped(ms[0], a.Peak)
		fb, _ := unmapped(ms[1], b.Peak)
		if g := fb - fa; g > tol {
			t.Errorf("weft %s: %s %s on %s of corpus, %s on %s: grew %s (%.1f bytes per extra corpus byte), want at most %s: memory must not grow with the corpus (issue 18)",
				name, what, memcheck.FormatBytes(fa), memcheck.FormatBytes(ms[0].CorpusBytes), memcheck.FormatBytes(fb),
				memcheck.FormatBytes(ms[1].CorpusBytes), memcheck.FormatBytes(g), float64(g)/float64(extra), memcheck.FormatBytes(tol))
		}
	}
}

// unmapped is the peak that excludes file-backed pages: RssAnon where
// /proc gives it, else the maximum resident set less every byte the verb
// could have mapped (weaker: it lets a mapped cache hide anonymous growth
// of up to its own size).
func unmapped(m memcheck.Measurement, p memcheck.Peak) (int64, string) {
	if p.PeakAnon >= 0 {
		return p.PeakAnon, "peak anonymous memory"
	}
	return p.MaxRSS - m.CorpusBytes - m.RunDirBytes, "maximum resident set less the corpus and run directory"
}

func anonText(n int64) string {
	if n < 0 {
		return "n/a"
	}
	return memcheck.FormatBytes(n)
}

// memSizes reads two corpus sizes, smaller first, from the environment.
func memSizes(t *testing.T, env, def string) [2]int64 {
	t.Helper()
	s := os.Getenv(env)
	if s == "" {
		s = def
	}
	f := strings.Split(s, ",")
	if len(f) != 2 {
		t.Fatalf("%s=%q: want two sizes such as %q", env, s, def)
	}
	var out [2]int64
	for i, x := range f {
		n, err := memcheck.ParseSize(x)
		if err != nil {
			t.Fatalf("%s: %v", env, err)
		}
		out[i] = n
	}
	if out[0] <= 0 || out[1] <= out[0] {
		t.Fatalf("%s=%q: want a smaller size then a larger one", env, s)
	}
	return out
}

// memEnvSize reads a size from the environment, or def when it is unset.
func memEnvSize(t *testing.T, env string, def int64) int64 {
	t.Helper()
	s := os.Getenv(env)
	if s == "" {
		return def
	}
	n, err := memcheck.ParseSize(s)
	if err != nil {
		t.Fatalf("%s: %v", env, err)
	}
	return n
}
