package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"sync/atomic"
	"syscall"
	"time"
	"weft/configs"

	"github.com/spf13/cobra"
	"golang.org/x/term"
)

// Exit statuses, documented in the README.
const (
	exitOK          = 0
	exitFailure     = 1
	exitUsage       = 2
	exitInterrupted = 3 // a signal stopped the run after it saved its state
)

// deps are what commands get from the outside world, injected so that tests
// can give buffers, a fixed clock and no terminal.
type deps struct {
	In            io.Reader
	Out, Err      io.Writer
	Now           func() time.Time
	ErrIsTerminal bool // draw progress bars on Err
	// Signals delivers the signals that stop a run (SIGINT, SIGTERM,
	// SIGUSR1); nil means none arrive. run hands them to a training session
	// while one is running (see claimSignals) and otherwise cancels the
	// command's context.
	Signals <-chan os.Signal

	claimed *atomic.Bool // a training session is watching Signals
}

// claimSignals tells run's signal handler that the caller watches
// d.Signals itself until release is called.
func (d *deps) claimSignals() (release func()) {
	if d.claimed == nil {
		return func() {}
	}
	d.claimed.Store(true)
	return func() { d.claimed.Store(false) }
}

func systemDeps() *deps {
	sig := make(chan os.Signal, 4)
	signal.Notify(sig, os.Interrupt, syscall.SIGTERM, syscall.SIGUSR1)
	return &deps{
		In:            os.Stdin,
		Out:           os.Stdout,
		Err:           os.Stderr,
		Now:           time.Now,
		ErrIsTerminal: term.IsTerminal(int(os.Stderr.Fd())),
		Signals:       sig,
	}
}

// usageError is a mistake in how a command was called: weft prints it with a
// hint to --help and exits 2.
type usageError struct{ err error }

func (e *usageError) Error() string { return e.err.Error() }
func (e *usageError) Unwrap() error { return e.err }

func usagef(format string, a ...any) error { return &usageError{fmt.Errorf(format, a...)} }

// exitError carries a specific exit status with its message.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

// run executes one command line and returns the exit status. Errors are
// printed as one line on d.Err.
func run(args []string, d *deps) int {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var interrupted atomic.Value // the signal that cancelled ctx, as a name
	if d.Signals != nil {
		dd := *d
		dd.claimed = new(atomic.Bool)
		fwd := make(chan os.Signal, 4)
		dd.Signals = fwd
		done := make(chan struct{})
		defer close(done)
		go relaySignals(d.Signals, fwd, dd.claimed, done, cancel, &interrupted, d.Err)
		d = &dd
	}
	root := newRootCmd(d)
	root.SetArgs(args)
	root.SetIn(d.In)
	root.SetOut(d.Out)
	root.SetErr(d.Err)
	cmd, err := root.ExecuteContextC(ctx)
	if err == nil {
		return exitOK
	}
	msg := oneLine(cobraSuggestion(err.Error()))
	var ue *usageError
	var ce *configs.Error
	if errors.As(err, &ue) || isCobraUsage(err) || (errors.As(err, &ce) && ce.File == "--set") {
		name := "weft"
		if cmd != nil {
			name = cmd.CommandPath()
		}
		fmt.Fprintf(d.Err, "weft: %s\nrun '%s --help' for usage\n", msg, name)
		return exitUsage
	}
	if sig, ok := interrupted.Load().(string); ok && errors.Is(err, context.Canceled) {
		fmt.Fprintf(d.Err, "weft: interrupted by %s\n", sig)
		return exitAbandoned
	}
	var ee *exitError
	if errors.As(err, &ee) {
		if ee.err != nil && ee.err.Error() != "" {
			fmt.Fprintf(d.Err, "weft: %s\n", msg)
		}
		return ee.code
	}
	fmt.Fprintf(d.Err, "weft: %s\n", msg)
	return exitFailure
}

// relaySignals passes the stopping signals on to a training session while
// one claims them; otherwise the first cancels the command (which then
// exits 130 with "interrupted") and a second exits at once.
func relaySignals(in <-chan os.Signal, fwd chan<- os.Signal, claimed *atomic.Bool, done <-chan struct{}, cancel context.CancelFunc, interrupted *atomic.Value, errw io.Writer) {
	n := 0
	for {
		select {
		case <-done:
			return
		case sig := <-in:
			if claimed.Load() {
				select {
				case fwd <- sig:
				default:
				}
				continue
			}
			n++
			if n == 1 {
				interrupted.Store(signalName(sig))
				cancel()
				continue
			}
			fmt.Fprintf(errw, "weft: second %s: exiting at once\n", signalName(sig))
			exitNow(exitAbandoned)
		}
	}
}

// cobraSuggestion turns cobra's two-paragraph "unknown command" error,
// with its "Did you mean this?" list, into one sentence.
func cobraSuggestion(msg string) string {
	head, list, ok := strings.Cut(msg, "Did you mean this?")
	if !ok {
		return msg
	}
	return strings.TrimSpace(head) + "; did you mean " + strings.Join(strings.Fields(list), " or ") + "?"
}

// isCobraUsage recognises the errors cobra itself returns for bad command
// lines (it has no error types for them).
func isCobraUsage(err error) bool {
	s := err.Error()
	for _, p := range []string{"unknown command", "unknown flag", "unknown shorthand flag", "flag needs an argument", "invalid argument", "accepts ", "requires at least", "requires at most", "bad flag syntax"} {
		if strings.HasPrefix(s, p) {
			return true
		}
	}
	return false
}

// oneLine keeps an error message on one line, as the README promises.
func oneLine(s string) string {
	s = strings.TrimSpace(s)
	return strings.Join(strings.Fields(strings.ReplaceAll(s, "\n", " ")), " ")
}

func newRootCmd(d *deps) *cobra.Command {
	root := &cobra.Command{
		Use:   "weft",
		Short: "Train recurrent next-token models on CPUs and compare them with classical baselines",
		Long: `weft trains vanilla RNN, GRU and LSTM models that predict the next character
or token of a corpus, on CPUs, with truncated backpropagation through time;
it samples and scores text with them and reports held-out perplexity and bits
per character against n-gram, Markov-chain and hidden-Markov baselines fitted
on the same split.

A run is described by one TOML run file ('weft config new' writes a starter)
and lives in a run directory (--run DIR).`,
		Version:       version,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetFlagErrorFunc(func(_ *cobra.Command, err error) error { return &usageError{err} })
	root.SetVersionTemplate("weft {{.Version}}\n")
	root.AddCommand(
		newConfigCmd(d, nil),
		newPrepareCmd(d, nil),
		newBaselinesCmd(d, nil),
		newEvalCmd(d, nil),
		newDemoCmd(d, nil),
		newTrainCmd(d, nil),
		newInspectCmd(d, nil),
		newSampleCmd(d, nil),
		newScoreCmd(d, nil),
		newServeCmd(d, nil),
		newExportCmd(d, nil),
		newBenchCmd(d, nil),
		newRunsCmd(d, nil),
		newSweepCmd(d, nil),
		newReportCmd(d, nil),
	)
	addCompletions(root)
	return root
}

// exactArgs is cobra.ExactArgs returning a usage error.
func exactArgs(n int, what string) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		if len(args) != n {
			return usagef("%s takes %s, got %d arguments", cmd.CommandPath(), what, len(args))
		}
		return nil
	}
}

func rangeArgs(lo, hi int, what string) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		if len(args) < lo || len(args) > hi {
			return usagef("%s takes %s, got %d arguments", cmd.CommandPath(), what, len(args))
		}
		return nil
	}
}
