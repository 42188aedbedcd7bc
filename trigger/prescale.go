package trigger

import (
	"errors"
	"sync/atomic"
)

// ErrUnknownPrescaleSet is returned (wrapped) by SetPrescaleSet and
// Menu.Prescales for a set the menu does not define.
var ErrUnknownPrescaleSet = errors.New("trigger: unknown prescale set")

// ErrLastLumiSlice is returned by SetPrescaleSet when the lumi slice in
// force is the largest uint32, so that no later slice exists to switch at.
var ErrLastLumiSlice = errors.New("trigger: no lumi slice after the last one")

// maxRegimes bounds the prescale history a Selector keeps for events that
// arrive after their lumi slice has been overtaken.
const maxRegimes = 8

// paddedCounter keeps hot atomic counters on separate cache lines, so that
// goroutines counting different rules do not contend.
type paddedCounter struct {
	n atomic.Uint64
	_ [56]byte
}

// regime is one prescale set in force from lumi slice from onwards. Its
// counters count passes per rule under this regime only: a switch starts
// every rule's count afresh, so that within a regime exactly floor(N/P) of
// N passes are kept.
type regime struct {
	set      string
	from     uint32
	prescale []int // per rule; 0: off or disabled
	counters []paddedCounter
}

// prescaleState is replaced as a whole (copy on write), so that reading
// "the slice in force" and "the regimes" is one atomic load and a switch
// requested during slice S lands exactly at the first event of a slice
// after S.
type prescaleState struct {
	started bool   // some event has been decided
	slice   uint32 // the highest lumi slice decided so far: the slice in force
	regimes []*regime
}

// lookup returns the regime of lumi slice l: the last one starting at or
// before l, or the oldest kept for slices older than all of them.
func (st *prescaleState) lookup(l uint32) *regime {
	for i := len(st.regimes) - 1; i > 0; i-- {
		if st.regimes[i].from <= l {
			return st.regimes[i]
		}
	}
	return st.regimes[0]
}

func newRegime(set string, from uint32, prescale []int) *regime {
	return &regime{set: set, from: from, prescale: prescale, counters: make([]paddedCounter, len(prescale))}
}

// regimeFor returns the regime for an event of lumi slice l, first
// recording l as in force if it is the newest slice seen. That record is a
// new state value: one small allocation per new lumi slice.
func (s *Selector) regimeFor(l uint32) *regime {
	for {
		st := s.state.Load()
		if st.started && l <= st.slice {
			return st.lookup(l)
		}
		next := &prescaleState{started: true, slice: l, regimes: st.regimes}
		if s.state.CompareAndSwap(st, next) {
			return next.lookup(l)
		}
	}
}

// SetPrescaleSet requests a switch to the named prescale set. It takes
// effect at the first event of the next lumi slice: every event whose
// LumiSlice is greater than the slice in force when SetPrescaleSet is called
// (the highest slice decided so far) uses the new set, and every event of
// that slice or an earlier one keeps the old set, whatever order goroutines
// decide them in. Before the first event it takes effect at once. A second
// request before the switch has happened replaces the first. It is safe for
// concurrent use.
func (s *Selector) SetPrescaleSet(name string) error {
	ps, err := s.menu.Prescales(name)
	if err != nil {
		return err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for {
		st := s.state.Load()
		next := &prescaleState{started: st.started, slice: st.slice}
		if !st.started {
			next.regimes = []*regime{newRegime(name, 0, ps)}
		} else {
			if st.slice == ^uint32(0) {
				return ErrLastLumiSlice
			}
			from := st.slice + 1
			for _, r := range st.regimes {
				if r.from < from { // drop a pending switch this one replaces
					next.regimes = append(next.regimes, r)
				}
			}
			next.regimes = append(next.regimes, newRegime(name, from, ps))
			if n := len(next.regimes); n > maxRegimes {
				next.regimes = next.regimes[n-maxRegimes:]
			}
		}
		if s.state.CompareAndSwap(st, next) {
			return nil
		}
	}
}

// PrescaleStatus describes the prescale sets of a Selector.
type PrescaleStatus struct {
	// Set is the set in force for Slice.
	Set string
	// Slice is the highest lumi slice decided so far (0 before any).
	Slice uint32
	// Pending is the set requested to take effect from lumi slice
	// PendingFrom, or "" if no switch is waiting.
	Pending     string
	PendingFrom uint32
}

// PrescaleStatus returns the set in force and any pending switch. It is
// safe for concurrent use.
func (s *Selector) PrescaleStatus() PrescaleStatus {
	st := s.state.Load()
	cur := st.lookup(st.slice)
	out := PrescaleStatus{Set: cur.set, Slice: st.slice}
	if last := st.regimes[len(st.regimes)-1]; st.started && last.from > st.slice {
		out.Pending, out.PendingFrom = last.set, last.from
	}
	return out
}
