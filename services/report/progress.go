package report

import (
	"fmt"
	"io"
	"strings"
	"time"
)

// Progress draws a one-line progress bar, redrawn in place with a
// carriage return, for a terminal. It is meant for Options.Progress and
// is used by one goroutine; Done ends the line. It reads the wall clock
// only to show the speed and to redraw at most ten times a second:
// nothing it shows goes into the report.
type Progress struct {
	w     io.Writer
	start time.Time
	last  time.Time
	drawn bool
}

// NewProgress returns a bar drawing on w.
func NewProgress(w io.Writer) *Progress {
	now := time.Now()
	return &Progress{w: w, start: now}
}

// Update redraws the bar for events decided and the share done of the
// input (0..1).
func (p *Progress) Update(events uint64, done float64) {
	now := time.Now()
	if p.drawn && now.Sub(p.last) < 100*time.Millisecond {
		return
	}
	p.last, p.drawn = now, true
	p.draw(events, done, now)
}

func (p *Progress) draw(events uint64, done float64, now time.Time) {
	const width = 30
	done = min(max(done, 0), 1)
	n := int(done * width)
	rate := 0.0
	if s := now.Sub(p.start).Seconds(); s > 0 {
		rate = float64(events) / s
	}
	fmt.Fprintf(p.w, "\r[%s%s] %3.0f%%  %d events  %s events/s ", strings.Repeat("#", n), strings.Repeat(".", width-n), 100*done, events, si(rate))
}

// Done draws the final state and ends the line.
func (p *Progress) Done(events uint64) {
	p.draw(events, 1, time.Now())
	fmt.Fprintln(p.w)
}
