package builder

import "math"

// Watermarks and source liveness. A source's watermark is the largest
// event time it has sent; the global watermark is the minimum over live
// sources. The builder keeps that minimum and how many live sources sit at
// it, so a fragment costs O(1) and the minimum is recomputed only when the
// last source at it moves on: once per crossing in steady state.

// touch records a valid fragment of event time t from source si: the
// source is alive again if it was dead, and its watermark moves up.
func (b *Builder) touch(si int, t int64) {
	s := &b.src[si]
	s.last = b.now
	if !s.alive {
		s.alive = true
		b.live++
		if d := satAdd(b.now, b.deadAft); d < b.deadline {
			b.deadline = d
		}
		if t > s.wm {
			s.wm = t
		}
		b.recomputeWatermark()
		return
	}
	if t <= s.wm {
		return
	}
	old := s.wm
	s.wm = t
	if old == b.wm {
		b.atMin--
		if b.atMin == 0 {
			b.recomputeWatermark()
		}
	}
}

// recomputeWatermark finds the minimum watermark over live sources and
// emits the crossings it has passed by more than the lateness.
func (b *Builder) recomputeWatermark() {
	m, n := int64(math.MaxInt64), 0
	for i := range b.src {
		s := &b.src[i]
		if !s.alive {
			continue
		}
		switch {
		case s.wm < m:
			m, n = s.wm, 1
		case s.wm == m:
			n++
		}
	}
	if n == 0 {
		// No live source: no watermark.
		b.wm, b.atMin = math.MinInt64, 0
		return
	}
	b.wm, b.atMin = m, n
	if m == math.MinInt64 {
		return // some live source has not sent anything yet
	}
	// A crossing at t is decided once the watermark exceeds t+Lateness,
	// that is when t < wm-Lateness. The closing time never moves back, so
	// a source coming back from the dead cannot reopen what has left.
	if c := satAdd(m, -b.lateness); c > b.closed {
		b.closed = c
		b.release()
	}
}

// checkDead declares dead every live source silent for longer than
// DeadAfter at the current arrival time, and sets the next deadline.
func (b *Builder) checkDead() {
	changed := false
	next := int64(math.MaxInt64)
	for i := range b.src {
		s := &b.src[i]
		if !s.alive {
			continue
		}
		d := satAdd(s.last, b.deadAft)
		if b.now > d {
			s.alive = false
			s.st.Deaths++
			b.live--
			changed = true
			continue
		}
		next = min(next, d)
	}
	b.deadline = next
	if !changed {
		return
	}
	b.recomputeWatermark()
	if b.live == 0 {
		b.drainOpen()
	}
}

// drainOpen emits every open crossing, oldest first, when no source is
// alive: nothing is left to wait for. The crossings stay remembered, so
// a straggler from a source coming back is late, not a second event.
func (b *Builder) drainOpen() {
	if b.waiting == 0 {
		return
	}
	for _, ci := range b.sortedTracked() {
		if b.pool[ci].open {
			b.emit(ci, 0)
		}
	}
}
