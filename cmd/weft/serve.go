package main

import (
	"context"
	"fmt"
	"net"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"weft/checkpoint/serve"
)

type serveOptions struct {
	cmdContext
	Run        string
	Checkpoint string
	Listen     string
	Limits     serve.Limits // from the flags

	// reloads delivers reload requests (SIGHUP); nil: runServe asks the
	// system for SIGHUP when the command gets the system's signals.
	reloads <-chan os.Signal
}

func newServeCmd(d *deps, runF func(*serveOptions) error) *cobra.Command {
	opts := &serveOptions{}
	lim := serve.DefaultLimits()
	cmd := &cobra.Command{
		Use:     "serve (--run DIR | --checkpoint FILE) [--listen 127.0.0.1:8750]",
		Example: "  weft serve --run runs/demo\n  weft serve --checkpoint model.safetensors --listen 127.0.0.1:9000",
		Short:   "Answer scoring and sampling requests over HTTP with a trained model",
		Long: `Load a trained model once (the run's best checkpoint, or --checkpoint as for
'weft sample') and answer JSON requests over HTTP:

  GET  /v1/health       is the service up ("ok", or "draining")
  GET  /v1/model        the model's facts: cell, sizes, vocabulary, step, validation
  POST /v1/score        {"lines": [...], "stream": {"name": ...}, "per_token": true}
  POST /v1/score/lines  one {"line": ..., "stream": {...}} per line in, one row per line out
  POST /v1/sample       {"prompt": ..., "length": "200", "seed": 7, "temperature": 0.8, ...}
  POST /v1/reload       load the checkpoint again

A scored line gets the numbers 'weft score' prints for it. Lines with a
stream name are scored in the context of the stream's earlier lines, as
'weft score --context N' would score the stream's lines concatenated; at
most --max-streams streams are kept, the least recently used dropped first.
Samples are those of 'weft sample' with the same seed and settings, and are
marked as generated.

The service listens on the loopback address unless --listen names another;
it has no authentication, so expose it only behind something that has.
Requests over a limit (--max-body-bytes, --max-line-chars,
--max-batch-lines, --max-sample-tokens, --max-samples) are refused with 413
and the limit's name. SIGHUP (or POST /v1/reload) loads the checkpoint
again: the run's best, which training may have replaced; a checkpoint that
does not load is refused and the old model keeps serving. SIGTERM or SIGINT
stops accepting connections, lets the requests in flight finish (at most
--drain-timeout) and exits 0; a second one exits at once.

` + generatedTextWarning,
		Args: exactArgs(0, "no arguments"),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.cmdContext = cmdContext{cmd.Context(), d}
			if runF != nil {
				return runF(opts)
			}
			return runServe(opts)
		},
	}
	f := cmd.Flags()
	f.StringVar(&opts.Run, "run", "", "run directory whose model to serve")
	f.StringVar(&opts.Checkpoint, "checkpoint", "", `checkpoint: with --run "best" (default), "latest", a step or a file name; else a file`)
	f.StringVar(&opts.Listen, "listen", "127.0.0.1:8750", "address and port to listen on")
	f.Int64Var(&opts.Limits.MaxBodyBytes, "max-body-bytes", lim.MaxBodyBytes, "largest request body (for /v1/score/lines, largest input line), in bytes")
	f.IntVar(&opts.Limits.MaxLineChars, "max-line-chars", lim.MaxLineChars, "longest line scored, in characters")
	f.IntVar(&opts.Limits.MaxBatchLines, "max-batch-lines", lim.MaxBatchLines, "most lines in one score request")
	f.IntVar(&opts.Limits.MaxSampleTokens, "max-sample-tokens", lim.MaxSampleTokens, "longest sample, in tokens")
	f.IntVar(&opts.Limits.MaxSamples, "max-samples", lim.MaxSamples, "most samples in one request")
	f.IntVar(&opts.Limits.MaxStreams, "max-streams", lim.MaxStreams, "carried streams kept (least recently used dropped)")
	f.IntVar(&opts.Limits.Workers, "workers", lim.Workers, "batches of lines scored at the same time (default: the number of CPUs)")
	f.DurationVar(&opts.Limits.BatchWait, "batch-wait", lim.BatchWait, "how long a batch waits for more lines once it has one (0: no wait)")
	f.DurationVar(&opts.Limits.DrainTimeout, "drain-timeout", lim.DrainTimeout, "longest wait for requests in flight when stopping")
	return cmd
}

func runServe(opts *serveOptions) error {
	var load serve.Loader
	switch {
	case opts.Run == "" && opts.Checkpoint == "":
		return usagef("give --run DIR or --checkpoint FILE")
	case opts.Run == "" || strings.ContainsAny(opts.Checkpoint, `/\`):
		load = serve.FileLoader(opts.Checkpoint)
	default:
		load = serve.RunLoader(opts.Run, opts.Checkpoint)
	}
	host, _, err := net.SplitHostPort(opts.Listen)
	if err != nil {
		return usagef("--listen %q: want HOST:PORT, such as 127.0.0.1:8750", opts.Listen)
	}
	for name, v := range map[string]int64{"--max-body-bytes": opts.Limits.MaxBodyBytes, "--max-line-chars": int64(opts.Limits.MaxLineChars),
		"--max-batch-lines": int64(opts.Limits.MaxBatchLines), "--max-sample-tokens": int64(opts.Limits.MaxSampleTokens),
		"--max-samples": int64(opts.Limits.MaxSamples), "--max-streams": int64(opts.Limits.MaxStreams), "--workers": int64(opts.Limits.Workers)} {
		if v < 1 {
			return usagef("%s must be at least 1, got %d", name, v)
		}
	}
	if opts.Limits.BatchWait < 0 || opts.Limits.DrainTimeout <= 0 {
		return usagef("--batch-wait must be 0 or more and --drain-timeout more than 0")
	}
	lim := opts.Limits
	if lim.BatchWait == 0 {
		lim.BatchWait = -1 // serve.Limits: negative means no wait
	}
	s, err := serve.New(load, lim)
	if err != nil {
		return err
	}
	defer s.Close()
	ln, err := net.Listen("tcp", opts.Listen)
	if err != nil {
		return fmt.Errorf("listen on %s: %w", opts.Listen, err)
	}
	if ip := net.ParseIP(host); host != "localhost" && (ip == nil || !ip.IsLoopback()) {
		fmt.Fprintf(opts.Err, "weft: warning: listening on %s, beyond this machine; the service has no authentication\n", ln.Addr())
	}

	// The stopping signals drain; SIGHUP reloads.
	ctx, drain := context.WithCancel(opts.ctx)
	defer drain()
	release := opts.claimSignals()
	defer release()
	reloads := opts.reloads
	if reloads == nil && opts.Signals != nil {
		hup := make(chan os.Signal, 1)
		signal.Notify(hup, syscall.SIGHUP)
		defer signal.Stop(hup)
		reloads = hup
	}
	done := make(chan struct{})
	defer close(done)
	go func() {
		n := 0
		for {
			select {
			case <-done:
				return
			case sig := <-opts.Signals:
				n++
				if n == 1 {
					fmt.Fprintf(opts.Err, "weft: %s: draining the requests in flight, then exiting\n", signalName(sig))
					drain()
					continue
				}
				fmt.Fprintf(opts.Err, "weft: second %s: exiting at once\n", signalName(sig))
				exitNow(exitAbandoned)
			case <-reloads:
				if f, err := s.Reload(); err != nil {
					fmt.Fprintf(opts.Err, "weft: %s\n", oneLine(err.Error()))
				} else {
					fmt.Fprintf(opts.Err, "weft: reloaded %s step %d from %s (generation %d)\n", f.Name, f.Step, f.Path, f.Generation)
				}
			}
		}
	}()
	f := s.Facts()
	fmt.Fprintf(opts.Err, "weft: serving %s step %d from %s on http://%s (SIGHUP reloads, SIGTERM drains and exits)\n", f.Name, f.Step, f.Path, ln.Addr())
	if err := s.Serve(ctx, ln); err != nil {
		return err
	}
	fmt.Fprintln(opts.Err, "weft: drained, exiting")
	return nil
}
