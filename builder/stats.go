package builder

// Stats is a snapshot of a Builder's accounting. Every fragment offered to
// Add and not refused for want of room is Received and ends in exactly one
// of InEvents, Pending, Duplicate, Late, Malformed, UnknownSource or
// OutOfTime; Balanced checks that sum.
type Stats struct {
	// Received counts fragments offered to Add, except those refused with
	// ErrWindowFull.
	Received uint64
	// InEvents counts fragments in emitted events; Pending those held in
	// open crossings.
	InEvents, Pending uint64
	// Discarded fragments, by reason.
	Duplicate, Late, Malformed, UnknownSource, OutOfTime uint64
	// Malformed, by sub-reason: wrong run, bunch counters out of range,
	// failed checksum. They add up to Malformed.
	MalformedRun, MalformedBcid, MalformedChecksum uint64
	// Events emitted: complete, incomplete (missing at least one source),
	// and among the incomplete ones those evicted by the full window and
	// those emitted by Flush.
	EventsComplete, EventsIncomplete, EventsEvicted, EventsFlushed uint64
	// WindowFullRefusals counts Add calls refused with ErrWindowFull.
	WindowFullRefusals uint64
	// Open is the number of crossings tracked, open or remembered after
	// emission; never more than Config.Window.
	Open int
	// Waiting is the number of open crossings, not yet emitted.
	Waiting int
	// Live is the number of sources currently alive.
	Live int
	// WatermarkNs is the global watermark (event time); math.MinInt64
	// while a live source has sent nothing yet or no source is alive.
	WatermarkNs int64
	// ClosedNs is the closing time: crossings with a nominal time before it
	// have been decided, and fragments for them are late. math.MinInt64
	// before anything closed.
	ClosedNs int64
}

// Discarded returns the fragments received but not used in an event.
func (s Stats) Discarded() uint64 {
	return s.Duplicate + s.Late + s.Malformed + s.UnknownSource + s.OutOfTime
}

// Balanced reports whether the conservation law holds: Received equals
// InEvents + Pending + Discarded(), and the malformed sub-reasons add up.
func (s Stats) Balanced() bool {
	return s.Received == s.InEvents+s.Pending+s.Discarded() &&
		s.Malformed == s.MalformedRun+s.MalformedBcid+s.MalformedChecksum
}

// SourceStats is the accounting of one expected source. Its counts obey
// the same conservation law as Stats, without unknown sources. A fragment
// is counted here by the source id it carries; a malformed one whose id is
// not expected is counted only in Stats.
type SourceStats struct {
	Received, InEvents, Pending                    uint64
	Duplicate, Late, Malformed, OutOfTime          uint64
	MalformedRun, MalformedBcid, MalformedChecksum uint64
	// Missing counts emitted events this source did not report to.
	Missing uint64
	// Deaths counts the times the source was declared dead.
	Deaths uint64
	// WatermarkNs is the largest event time the source has sent,
	// math.MinInt64 before its first valid fragment.
	WatermarkNs int64
	// LastArrivalNs is the arrival time of its latest valid fragment (the
	// builder's first arrival time if it has sent none).
	LastArrivalNs int64
	Alive         bool
}

// Discarded returns the source's fragments received but not used.
func (s SourceStats) Discarded() uint64 {
	return s.Duplicate + s.Late + s.Malformed + s.OutOfTime
}

// Balanced reports whether the source's counts obey the conservation law.
func (s SourceStats) Balanced() bool {
	return s.Received == s.InEvents+s.Pending+s.Discarded() &&
		s.Malformed == s.MalformedRun+s.MalformedBcid+s.MalformedChecksum
}

// Stats returns a snapshot of the accounting.
func (b *Builder) Stats() Stats {
	s := b.st
	s.Open = len(b.heap)
	s.Waiting = b.waiting
	s.Live = b.live
	s.WatermarkNs = b.wm
	s.ClosedNs = b.closed
	return s
}

// SourceStats returns the accounting of source id, and false if id is not
// an expected source (unknown sources are only counted in total, in
// Stats.UnknownSource).
func (b *Builder) SourceStats(id uint32) (SourceStats, bool) {
	i := b.index.find(id)
	if i < 0 {
		return SourceStats{}, false
	}
	s := &b.src[i]
	st := s.st
	st.WatermarkNs, st.LastArrivalNs, st.Alive = s.wm, s.last, s.alive
	return st, true
}

// Alive reports whether source id is expected and currently alive: it has
// sent a valid fragment within DeadAfter of the latest arrival time seen
// (or the builder started less than DeadAfter ago).
func (b *Builder) Alive(id uint32) bool {
	i := b.index.find(id)
	return i >= 0 && b.src[i].alive
}

// Sources returns the expected source ids, ascending, in a new slice.
func (b *Builder) Sources() []uint32 {
	return append([]uint32(nil), b.ids...)
}
