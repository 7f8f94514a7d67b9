package main

import (
	"fmt"
	"time"

	"github.com/schollz/progressbar/v3"

	"weft/eval"
)

// stageProgress turns eval's progress reports into a bar per stage on a
// terminal, or into a plain line per stage (and one every few seconds for a
// long one) otherwise. It is not safe for concurrent use.
type stageProgress struct {
	d        *deps
	stage    string
	bar      *progressbar.ProgressBar
	lastLine time.Time
	quiet    bool
}

func newStageProgress(d *deps, quiet bool) *stageProgress {
	return &stageProgress{d: d, quiet: quiet}
}

// Func is the eval.ProgressFunc to pass to the fitting functions.
func (s *stageProgress) Func() eval.ProgressFunc {
	if s.quiet {
		return nil
	}
	return s.report
}

func (s *stageProgress) report(stage string, done, total int) {
	if stage != s.stage {
		s.finish()
		s.stage = stage
		if s.d.ErrIsTerminal {
			s.bar = progressbar.NewOptions(total,
				progressbar.OptionSetWriter(s.d.Err),
				progressbar.OptionSetDescription(stage),
				progressbar.OptionShowCount(),
				progressbar.OptionSetWidth(30),
				progressbar.OptionThrottle(100*time.Millisecond),
				progressbar.OptionClearOnFinish(),
			)
		} else {
			fmt.Fprintf(s.d.Err, "%s ...\n", stage)
			s.lastLine = s.d.Now()
		}
	}
	if s.bar != nil {
		_ = s.bar.Set(done)
		return
	}
	if now := s.d.Now(); now.Sub(s.lastLine) >= 10*time.Second && done < total {
		fmt.Fprintf(s.d.Err, "%s: %d of %d\n", stage, done, total)
		s.lastLine = now
	}
}

// Status prints a one-off step, such as "scoring 5-gram kneser_ney".
func (s *stageProgress) Status(msg string) {
	if s.quiet {
		return
	}
	s.finish()
	fmt.Fprintf(s.d.Err, "%s ...\n", msg)
}

func (s *stageProgress) finish() {
	if s.bar != nil {
		_ = s.bar.Finish()
		s.bar = nil
	}
	s.stage = ""
}
