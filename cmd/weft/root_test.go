package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"weft/configs"
)

// runCmd runs one command line with buffers for the streams.
func runCmd(t *testing.T, stdin string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	d := &deps{
		In:  strings.NewReader(stdin),
		Out: &out,
		Err: &errb,
		Now: func() time.Time { return time.Date(2026, 12, 1, 12, 0, 0, 0, time.UTC) },
	}
	code = run(args, d)
	return code, out.String(), errb.String()
}

func TestHelpListsCommands(t *testing.T) {
	code, out, _ := runCmd(t, "", "--help")
	if code != exitOK {
		t.Fatalf("exit %d", code)
	}
	for _, c := range newRootCmd(&deps{}).Commands() {
		if c.Hidden || c.Name() == "help" {
			continue
		}
		if !strings.Contains(out, c.Name()) || c.Short == "" {
			t.Errorf("--help does not list %q with a purpose", c.Name())
		}
	}
}

func TestVersion(t *testing.T) {
	code, out, _ := runCmd(t, "", "--version")
	if code != exitOK || !strings.HasPrefix(out, "weft ") {
		t.Fatalf("got exit %d output %q, want weft VERSION", code, out)
	}
}

func TestUsageErrorsExit2(t *testing.T) {
	for _, args := range [][]string{
		{"no-such-command"},
		{"config", "show"},
		{"config", "show", "--no-such-flag", "x"},
		{"config", "new", "no-such-preset"},
	} {
		code, _, stderr := runCmd(t, "", args...)
		if code != exitUsage {
			t.Errorf("%v: got exit %d, want %d (stderr %q)", args, code, exitUsage, stderr)
		}
		if !strings.HasPrefix(stderr, "weft: ") || strings.Contains(stderr, "goroutine") {
			t.Errorf("%v: stderr %q, want a one-line weft: message", args, stderr)
		}
	}
}

func TestConfigNewWritesPreset(t *testing.T) {
	code, out, _ := runCmd(t, "", "config", "new")
	p, _ := configs.LookupPreset(configs.DefaultPreset)
	if code != exitOK || out != string(p.Text) {
		t.Fatalf("got exit %d and %d bytes, want the %s preset", code, len(out), configs.DefaultPreset)
	}
	code, out, _ = runCmd(t, "", "config", "new", "--list")
	if code != exitOK || !strings.Contains(out, "char-large") {
		t.Fatalf("--list: got exit %d output %q", code, out)
	}
}

func TestConfigShow(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "run.toml")
	if err := os.WriteFile(path, []byte("[data]\nfiles = [\"corpus.txt\"]\n[model]\nhidden_size = 32\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := runCmd(t, "", "config", "show", path, "--set", "model.layers=2")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, want := range []string{"hidden_size = 32", "layers = 2", filepath.Join(dir, "corpus.txt")} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}

	if err := os.WriteFile(path, []byte("[model]\nhiden_size = 32\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, stderr = runCmd(t, "", "config", "show", path)
	want := "weft: " + path + ":2: unknown key model.hiden_size; did you mean model.hidden_size?\n"
	if code != exitFailure || stderr != want {
		t.Errorf("got exit %d stderr %q, want exit 1 and %q", code, stderr, want)
	}

	code, _, stderr = runCmd(t, "", "config", "show", filepath.Join(dir, "missing.toml"))
	if code != exitFailure || !strings.Contains(stderr, "missing.toml: cannot read run file") {
		t.Errorf("missing file: got exit %d stderr %q", code, stderr)
	}
}

func TestRelaySignals(t *testing.T) {
	in := make(chan os.Signal, 1)
	fwd := make(chan os.Signal, 1)
	claimed := new(atomic.Bool)
	done := make(chan struct{})
	defer close(done)
	ctx, cancel := context.WithCancel(context.Background())
	var interrupted atomic.Value
	var errb bytes.Buffer
	go relaySignals(in, fwd, claimed, done, cancel, &interrupted, &errb)

	// While a training session claims the signals, they go to it and the
	// command's context stays alive.
	claimed.Store(true)
	in <- syscall.SIGTERM
	if got := <-fwd; got != syscall.SIGTERM {
		t.Fatalf("forwarded %v, want SIGTERM", got)
	}
	if ctx.Err() != nil {
		t.Fatal("context cancelled while a session claimed the signals")
	}
	// Unclaimed, the first signal cancels the command.
	claimed.Store(false)
	in <- os.Interrupt
	<-ctx.Done()
	if got, _ := interrupted.Load().(string); got != "SIGINT" {
		t.Errorf("recorded %q, want SIGINT", got)
	}
}
