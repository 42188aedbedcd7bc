package stack

import (
	"fmt"
	"io"
	"time"
)

// status prints the compact per-interval line of `up`.
type status struct {
	c                        *Chain
	last                     time.Time
	crossings, built, accept uint64
}

func newStatus(c *Chain) *status { return &status{c: c, last: time.Now()} }

func (st *status) line(w io.Writer) {
	now := time.Now()
	dt := now.Sub(st.last).Seconds()
	b := st.c.asm.Stats()
	crossings, built, accepted := st.c.emu.Offered(), b.EventsComplete+b.EventsIncomplete, st.c.sel.Accepted()
	fmt.Fprintf(w, "%6.1fs  crossings/s %8.0f  built/s %8.0f  accepted/s %7.1f  incomplete %d  latency p99 %.2fms\n",
		st.c.Elapsed().Seconds(),
		float64(crossings-st.crossings)/dt, float64(built-st.built)/dt, float64(accepted-st.accept)/dt,
		b.EventsIncomplete, st.c.sel.EndToEnd.Quantile(0.99).Seconds()*1e3)
	st.last, st.crossings, st.built, st.accept = now, crossings, built, accepted
}
