package builder

import (
	"fmt"
	"slices"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// record is a deep copy of an emitted Event, safe to keep.
type record struct {
	Run            uint32
	Orbit          uint64
	Bcid           uint32
	TimestampNs    int64
	Sources        []uint32 // fragment source ids, in event order
	Stamps         []int64  // fragment timestamps, in event order
	Tags           []uint32 // first tower of each fragment, to tell copies apart
	Missing        []uint32
	Flags          uint32
	FirstArrivalNs int64
	EarliestSentNs int64
}

func (r record) key() uint64 { return r.Orbit*detector.SlotsPerOrbit + uint64(r.Bcid) }

func (r record) String() string {
	return fmt.Sprintf("{orbit %d bcid %d t %d sources %v missing %v flags %d}", r.Orbit, r.Bcid, r.TimestampNs, r.Sources, r.Missing, r.Flags)
}

func copyEvent(ev *Event) record {
	r := record{Run: ev.Run, Orbit: ev.Orbit, Bcid: ev.Bcid, TimestampNs: ev.TimestampNs, Missing: slices.Clone(ev.Missing),
		Flags: ev.Flags, FirstArrivalNs: ev.FirstArrivalNs, EarliestSentNs: ev.EarliestSentNs}
	for _, f := range ev.Fragments {
		r.Sources = append(r.Sources, f.SourceId)
		r.Stamps = append(r.Stamps, f.TimestampNs)
		var tag uint32
		if c := f.GetCalo(); c != nil && len(c.Towers) > 0 {
			tag = c.Towers[0]
		}
		r.Tags = append(r.Tags, tag)
	}
	return r
}

// collector keeps every event emitted, in order.
type collector struct{ events []record }

func (c *collector) emit(ev *Event) { c.events = append(c.events, copyEvent(ev)) }

func (c *collector) take() []record {
	e := c.events
	c.events = nil
	return e
}

// frag returns a sealed fragment of crossing (orbit, bcid) from source src
// in run, stamped with the crossing's nominal time on the default clock,
// with a one-tower calorimeter payload.
func frag(src, run uint32, orbit uint64, bcid uint32) *pb.Fragment {
	f := &pb.Fragment{SourceId: src, Run: run, Orbit: orbit, Bcid: bcid,
		TimestampNs: detector.DefaultClock().Nominal(orbit, bcid),
		Payload:     &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{src*1000 + bcid%1000}, EtCounts: []uint32{7}}}}
	f.Seal()
	return f
}

// newBuilder returns a builder for cfg feeding a new collector.
func newBuilder(t testing.TB, cfg Config) (*Builder, *collector) {
	t.Helper()
	c := &collector{}
	b, err := New(cfg, c.emit)
	if err != nil {
		t.Fatalf("New: %v", err)
	}
	return b, c
}

// checkBalanced fails the test unless b's accounting is conserved, in
// total and per source, and the window bound holds.
func checkBalanced(t testing.TB, b *Builder, window int) {
	t.Helper()
	s := b.Stats()
	if !s.Balanced() {
		t.Fatalf("accounting not conserved: %+v", s)
	}
	if s.Open > window {
		t.Fatalf("%d crossings tracked, window is %d", s.Open, window)
	}
	var recv, mal uint64
	for _, id := range b.Sources() {
		ss, ok := b.SourceStats(id)
		if !ok {
			t.Fatalf("SourceStats(%d) not found", id)
		}
		if !ss.Balanced() {
			t.Fatalf("source %d accounting not conserved: %+v", id, ss)
		}
		recv += ss.Received
		mal += ss.Malformed
	}
	// What no expected source accounts for is the unknown sources and the
	// malformed fragments whose source id is not an expected one.
	if s.Received-recv-s.UnknownSource != s.Malformed-mal {
		t.Fatalf("per-source received %d (malformed %d), unknown %d: does not add up to %+v", recv, mal, s.UnknownSource, s)
	}
}

func seq(from, to uint32) []uint32 {
	var s []uint32
	for i := from; i <= to; i++ {
		s = append(s, i)
	}
	return s
}
