package builder

import pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"

// Event is one built bunch crossing, as handed to the emit callback.
//
// An Event and its slices are valid only during the callback: the Builder
// reuses them for the next event, so copy what you keep. The fragments the
// slice points to are the caller's own, passed to Add; the Builder holds
// no reference to them after the callback.
type Event struct {
	Run   uint32
	Orbit uint64
	Bcid  uint32
	// TimestampNs is the nominal time of the crossing, ns from run start.
	TimestampNs int64
	// Fragments holds one fragment per reporting source, by ascending
	// source id.
	Fragments []*pb.Fragment
	// Missing lists the expected sources that did not report, ascending.
	Missing []uint32
	// Flags is the OR of pb.EventFlag bits: INCOMPLETE when Missing is not
	// empty, EVICTED when the full window pushed it out early, FLUSHED
	// when Flush emitted it.
	Flags uint32
	// FirstArrivalNs is the arrival time of the crossing's first fragment.
	FirstArrivalNs int64
	// EarliestSentNs is the smallest sentNs passed with its fragments.
	EarliestSentNs int64
}

// emit builds the event of open crossing ci into the reused Event, hands
// it to the callback and marks the crossing emitted. The crossing stays
// tracked (remembered) until the caller forgets it.
func (b *Builder) emit(ci int32, flags uint32) {
	c := &b.pool[ci]
	ev := &b.ev
	ev.Orbit, ev.Bcid = c.key/b.slots, uint32(c.key%b.slots)
	ev.TimestampNs = c.t
	ev.FirstArrivalNs, ev.EarliestSentNs = c.first, c.sent
	ev.Fragments, ev.Missing = ev.Fragments[:0], ev.Missing[:0]
	n := len(b.ids)
	cell := b.frags[int(ci)*n : int(ci+1)*n]
	for i, f := range cell {
		s := &b.src[i].st
		if f != nil {
			ev.Fragments = append(ev.Fragments, f)
			cell[i] = nil
			s.Pending--
			s.InEvents++
		} else {
			ev.Missing = append(ev.Missing, b.ids[i])
			s.Missing++
		}
	}
	k := uint64(len(ev.Fragments))
	b.st.Pending -= k
	b.st.InEvents += k
	if len(ev.Missing) > 0 {
		flags |= incompleteFlag
		b.st.EventsIncomplete++
	} else {
		b.st.EventsComplete++
	}
	if flags&evictedFlag != 0 {
		b.st.EventsEvicted++
	}
	if flags&flushedFlag != 0 {
		b.st.EventsFlushed++
	}
	ev.Flags = flags
	c.open = false
	c.n = 0
	b.waiting--

	// Every count is settled before the callback, so the Builder stays
	// consistent even if the callback panics and the caller recovers.
	b.emitting = true
	defer func() { b.emitting = false }()
	b.emitFn(ev)
}
