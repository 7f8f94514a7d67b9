package main

import (
	"fmt"
	"io"
	"math"
	"strings"
	"sync"
	"time"
	"weft/checkpoint/runs"

	"github.com/schollz/progressbar/v3"
)

// statusText is the progress line of a training run, in the order an
// overnight user reads it: where validation stands and its best, the time
// left to the budget, the planned end of a deadline schedule and whether it
// is on time, then speed, training loss and gradient norm, and the
// position; every figure with its unit.
func statusText(st runs.Status) string {
	var b strings.Builder
	if math.IsNaN(st.ValBitsPerChar) {
		b.WriteString("validation not measured yet")
	} else {
		fmt.Fprintf(&b, "validation %.4f bits/char", st.ValBitsPerChar)
		if st.BestStep != st.Step || st.BestBitsPerChar != st.ValBitsPerChar {
			fmt.Fprintf(&b, " (best %.4f at step %s)", st.BestBitsPerChar, thousands(st.BestStep))
		}
	}
	if st.ETA >= 0 {
		fmt.Fprintf(&b, " | %s left", roundDuration(st.ETA))
	}
	if st.PlannedSteps > 0 && st.PlanSlackKnown {
		if st.PlanSlack >= 0 {
			fmt.Fprintf(&b, " | planned end step %s, on time (%s spare)", thousands(st.PlannedSteps), roundDuration(st.PlanSlack))
		} else {
			fmt.Fprintf(&b, " | planned end step %s, %s late", thousands(st.PlannedSteps), roundDuration(-st.PlanSlack))
		}
	}
	fmt.Fprintf(&b, " | %s tokens/s | training loss %.4f nats/token | gradient norm %.3g before clipping | step %s",
		thousands(int64(st.TokensPerSec)), st.Loss, st.GradNorm, thousands(st.Step))
	if st.Epoch > 0 {
		fmt.Fprintf(&b, " of epoch %d", st.Epoch+1)
	}
	return b.String()
}

func roundDuration(d time.Duration) time.Duration {
	switch {
	case d >= time.Hour:
		return d.Round(time.Minute)
	case d >= time.Minute:
		return d.Round(time.Second)
	}
	return d.Round(100 * time.Millisecond)
}

// reporter shows training progress on standard error: a bar redrawn in
// place when it is a terminal, otherwise one plain line every interval of
// the injected clock. Messages go above the bar. It is safe for concurrent
// use (the signal watcher writes messages too).
type reporter struct {
	mu       sync.Mutex
	w        io.Writer
	now      func() time.Time
	terminal bool
	quiet    bool
	every    time.Duration
	next     time.Time // when the next plain line is due
	bar      *progressbar.ProgressBar
	barMax   int64
}

func newReporter(d *deps, every time.Duration, quiet bool) *reporter {
	return &reporter{w: d.Err, now: d.Now, terminal: d.ErrIsTerminal, quiet: quiet, every: every}
}

// update shows st: redraws the bar, or prints a line when one is due.
func (r *reporter) update(st runs.Status) {
	if r.quiet {
		return
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.terminal {
		now := r.now()
		if r.next.IsZero() {
			r.next = now.Add(r.every)
			return
		}
		if now.Before(r.next) {
			return
		}
		for !now.Before(r.next) {
			r.next = r.next.Add(r.every)
		}
		fmt.Fprintf(r.w, "%s  %s\n", now.Format("15:04:05"), statusText(st))
		return
	}
	max := int64(-1)
	if st.MaxSteps > 0 {
		max = st.MaxSteps
	}
	if r.bar == nil || r.barMax != max {
		if r.bar != nil {
			r.bar.Exit()
		}
		r.bar = progressbar.NewOptions64(max,
			progressbar.OptionSetWriter(r.w),
			progressbar.OptionSetWidth(24),
			progressbar.OptionThrottle(150*time.Millisecond),
			progressbar.OptionShowCount(),
			progressbar.OptionSetPredictTime(false),
			progressbar.OptionSetElapsedTime(false),
			progressbar.OptionShowDescriptionAtLineEnd(),
			progressbar.OptionSetRenderBlankState(false),
			progressbar.OptionClearOnFinish(),
			progressbar.OptionSpinnerType(14),
		)
		r.barMax = max
	}
	r.bar.Set64(st.Step)
	r.bar.Describe(statusText(st))
}

func (r *reporter) print(format string, args []any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.bar != nil {
		r.bar.Clear()
	}
	fmt.Fprintf(r.w, format+"\n", args...)
}

// logf prints an informational message (not when quiet).
func (r *reporter) logf(format string, args ...any) {
	if !r.quiet {
		r.print(format, args)
	}
}

// warnf prints a warning, even when quiet.
func (r *reporter) warnf(format string, args ...any) { r.print("weft: "+format, args) }

// finish removes the bar.
func (r *reporter) finish() {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.bar != nil {
		r.bar.Finish()
		r.bar.Exit()
		r.bar = nil
	}
}
