package builder

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

func TestNewValidatesConfig(t *testing.T) {
	ok := Config{Sources: []uint32{1, 2}}
	cases := []struct {
		name  string
		cfg   func(Config) Config
		field string
	}{
		{"no sources", func(c Config) Config { c.Sources = nil; return c }, "Config.Sources"},
		{"source zero", func(c Config) Config { c.Sources = []uint32{1, 0}; return c }, "Config.Sources"},
		{"source twice", func(c Config) Config { c.Sources = []uint32{4, 2, 4}; return c }, "source 4 twice"},
		{"bad clock", func(c Config) Config { c.Clock = detector.Clock{Slots: 10}; return c }, "Config.Clock"},
		{"sub-ns slots", func(c Config) Config { c.Clock = detector.Clock{Slots: 10, SlotNs: 0.5}; return c }, "Config.Clock.SlotNs"},
		{"bad phase", func(c Config) Config { c.Clock = detector.Clock{Slots: 10, SlotNs: 25, PhaseNs: math.NaN()}; return c }, "Config.Clock.PhaseNs"},
		{"bad mode", func(c Config) Config { c.Mode = 7; return c }, "Config.Mode"},
		{"negative tolerance", func(c Config) Config { c.Tolerance = -1; return c }, "Config.Tolerance"},
		{"tolerance of half a slot", func(c Config) Config { c.Mode, c.Tolerance = ByTimestamp, 13; return c }, "Config.Tolerance"},
		{"ignore counters by counter", func(c Config) Config { c.IgnoreCounters = true; return c }, "Config.IgnoreCounters"},
		{"negative lateness", func(c Config) Config { c.Lateness = -5; return c }, "Config.Lateness"},
		{"negative dead after", func(c Config) Config { c.DeadAfter = -5; return c }, "Config.DeadAfter"},
		{"negative window", func(c Config) Config { c.Window = -1; return c }, "Config.Window"},
		{"huge window", func(c Config) Config { c.Window = 1 << 25; return c }, "Config.Window"},
		{"bad policy", func(c Config) Config { c.WhenFull = 3; return c }, "Config.WhenFull"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := New(tc.cfg(ok), func(*Event) {})
			if err == nil {
				t.Fatal("New accepted a bad config")
			}
			if !strings.HasPrefix(err.Error(), "builder: ") || !strings.Contains(err.Error(), tc.field) {
				t.Errorf("error %q does not name %q", err, tc.field)
			}
		})
	}
	if _, err := New(ok, nil); err == nil || !strings.Contains(err.Error(), "emit") {
		t.Errorf("nil callback: error %v", err)
	}
	if _, err := New(ok, func(*Event) {}); err != nil {
		t.Errorf("good config refused: %v", err)
	}
	// The caller's slice is not reordered.
	src := []uint32{3, 1, 2}
	b, err := New(Config{Sources: src}, func(*Event) {})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(src, []uint32{3, 1, 2}) || !slices.Equal(b.Sources(), []uint32{1, 2, 3}) {
		t.Errorf("sources %v, builder has %v", src, b.Sources())
	}
}

func TestNominalMatchesClock(t *testing.T) {
	for _, clk := range []detector.Clock{detector.DefaultClock(), {Slots: 3564, SlotNs: 24.95, PhaseNs: 7.3}, {Slots: 100, SlotNs: 1, PhaseNs: -3}} {
		b, err := New(Config{Sources: []uint32{1}, Clock: clk}, func(*Event) {})
		if err != nil {
			t.Fatal(err)
		}
		for _, orbit := range []uint64{0, 1, 17, 40_000_000, b.maxOrbit - 1} {
			for _, bcid := range []uint32{0, 1, 99} {
				key := clk.SlotIndex(orbit, bcid)
				if got, want := b.nominal(key), clk.Nominal(orbit, bcid); got != want {
					t.Errorf("clock %+v orbit %d bcid %d: nominal %d, clock says %d", clk, orbit, bcid, got, want)
				}
				if k, ok := b.slotOf(clk.Nominal(orbit, bcid)); !ok || k != key {
					t.Errorf("clock %+v: slot of nominal time of %d is %d, %v", clk, key, k, ok)
				}
			}
		}
	}
}

func TestCompleteEventLeavesAtOnce(t *testing.T) {
	b, c := newBuilder(t, Config{Run: 7, Sources: []uint32{30, 10, 20}})
	fs := []*pb.Fragment{frag(20, 7, 5, 100), frag(30, 7, 5, 100), frag(10, 7, 5, 100)}
	sent := []int64{100, 50, 70}
	for i, f := range fs {
		if len(c.events) != 0 {
			t.Fatalf("event emitted after %d of 3 fragments", i)
		}
		if err := b.Add(f, int64(10+i), sent[i]); err != nil {
			t.Fatal(err)
		}
	}
	ev := c.take()
	if len(ev) != 1 {
		t.Fatalf("%d events, want 1", len(ev))
	}
	e := ev[0]
	want := record{Run: 7, Orbit: 5, Bcid: 100, TimestampNs: detector.DefaultClock().Nominal(5, 100), Sources: []uint32{10, 20, 30},
		FirstArrivalNs: 10, EarliestSentNs: 50}
	if e.Run != want.Run || e.Orbit != want.Orbit || e.Bcid != want.Bcid || e.TimestampNs != want.TimestampNs ||
		!slices.Equal(e.Sources, want.Sources) || len(e.Missing) != 0 || e.Flags != 0 ||
		e.FirstArrivalNs != want.FirstArrivalNs || e.EarliestSentNs != want.EarliestSentNs {
		t.Errorf("event %+v, want %+v", e, want)
	}
	s := b.Stats()
	if s.Received != 3 || s.InEvents != 3 || s.Pending != 0 || s.EventsComplete != 1 || s.EventsIncomplete != 0 || s.Open != 1 || s.Waiting != 0 {
		t.Errorf("stats %+v", s)
	}
	checkBalanced(t, b, DefaultWindow)
}

// TestWatermarkBoundary checks the Dataflow rule (Akidau et al., PVLDB
// 8(12) 2015): a crossing at t leaves incomplete only once the watermark,
// the minimum over sources of their largest event time, exceeds
// t+Lateness; at exactly t+Lateness it still waits.
func TestWatermarkBoundary(t *testing.T) {
	clk := detector.Clock{Slots: 3564, SlotNs: 25}
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2, 3}, Clock: clk, Lateness: 1000})
	add := func(src uint32, bcid uint32) {
		t.Helper()
		f := &pb.Fragment{SourceId: src, Bcid: bcid, TimestampNs: clk.Nominal(0, bcid)}
		f.Seal()
		if err := b.Add(f, 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	add(1, 100) // t = 2500
	add(2, 100)
	for _, src := range []uint32{1, 2, 3} {
		add(src, 140) // t = 3500 = 2500 + Lateness: complete, but 100 waits
	}
	if ev := c.take(); len(ev) != 1 || ev[0].Bcid != 140 {
		t.Fatalf("events %v, want only the complete crossing 140", ev)
	}
	add(1, 141)
	add(2, 141)
	if ev := c.take(); len(ev) != 0 {
		t.Fatalf("events %v before source 3 passed the crossing", ev)
	}
	add(3, 141) // watermark 3525 > 3500: 100 leaves, then 141 (complete)
	ev := c.take()
	if len(ev) != 2 || ev[0].Bcid != 100 || !slices.Equal(ev[0].Missing, []uint32{3}) || ev[0].Flags != uint32(pb.EventFlag_EVENT_FLAG_INCOMPLETE) ||
		ev[1].Bcid != 141 || len(ev[1].Missing) != 0 {
		t.Fatalf("events %v, want 100 missing [3] then 141 complete", ev)
	}
	if s := b.Stats(); s.WatermarkNs != 3525 || s.ClosedNs != 2525 || s.EventsIncomplete != 1 || s.EventsComplete != 2 {
		t.Errorf("stats %+v", s)
	}
	checkBalanced(t, b, DefaultWindow)
}

func TestClassification(t *testing.T) {
	const run = 7
	b, c := newBuilder(t, Config{Run: run, Sources: []uint32{1, 2}, Lateness: 1000})
	clk := detector.DefaultClock()
	type step struct {
		name   string
		f      *pb.Fragment
		want   error  // nil: accepted
		reason Reason // with want
	}
	corrupt := frag(1, run, 0, 10)
	corrupt.Bcid = 11 // not resealed
	corruptUnknown := frag(99, run, 0, 10)
	corruptUnknown.Run = 1
	early := frag(2, run, 0, 10)
	early.TimestampNs -= 6
	early.Seal()
	onEdge := frag(2, run, 0, 12)
	onEdge.TimestampNs += 5
	onEdge.Seal()
	unstamped := frag(1, run, 0, 12)
	unstamped.TimestampNs = 0
	unstamped.Seal()
	steps := []step{
		{"unknown source", frag(99, run, 0, 10), ErrUnknownSource, ReasonUnknownSource},
		{"wrong run", frag(1, run+1, 0, 10), ErrMalformed, ReasonMalformedRun},
		{"bcid out of range", frag(1, run, 0, 3564), ErrMalformed, ReasonMalformedBcid},
		{"orbit out of range", frag(2, run, 1<<62, 0), ErrMalformed, ReasonMalformedBcid},
		{"bad checksum", corrupt, ErrMalformed, ReasonMalformedChecksum},
		{"bad checksum, unknown source", corruptUnknown, ErrMalformed, ReasonMalformedChecksum},
		{"6 ns early", early, ErrOutOfTime, ReasonOutOfTime},
		{"5 ns late is within tolerance", onEdge, nil, 0},
		{"no timestamp is not checked", unstamped, nil, 0}, // completes crossing 12
		{"duplicate of an emitted crossing", frag(1, run, 0, 12), ErrDuplicate, ReasonDuplicate},
		{"opens crossing 20", frag(1, run, 0, 20), nil, 0},
		{"duplicate of an open crossing", frag(1, run, 0, 20), ErrDuplicate, ReasonDuplicate},
		{"source 1 moves far on", frag(1, run, 0, 200), nil, 0},
		{"source 2 too: 20 leaves without it, 200 is complete", frag(2, run, 0, 200), nil, 0},
		{"late for a crossing that left", frag(2, run, 0, 20), ErrLate, ReasonLate},
		{"late behind the watermark, never seen", frag(2, run, 0, 30), ErrLate, ReasonLate},
		{"late even from a source that had reported", frag(1, run, 0, 20), ErrLate, ReasonLate},
		{"duplicate of a remembered crossing", frag(1, run, 0, 200), ErrDuplicate, ReasonDuplicate},
	}
	for i, st := range steps {
		err := b.Add(st.f, int64(i), int64(i))
		if st.want == nil {
			if err != nil {
				t.Fatalf("%s: %v", st.name, err)
			}
			continue
		}
		var fe *FragmentError
		if !errors.Is(err, st.want) || !errors.As(err, &fe) || fe.Reason != st.reason {
			t.Fatalf("%s: error %v, want %v (%v)", st.name, err, st.want, st.reason)
		}
		if !strings.HasPrefix(err.Error(), "builder: ") || !strings.Contains(err.Error(), "source") {
			t.Errorf("%s: message %q", st.name, err)
		}
		if fe.SourceID != st.f.SourceId || fe.Bcid != st.f.Bcid || fe.Orbit != st.f.Orbit {
			t.Errorf("%s: error fields %+v", st.name, fe)
		}
		checkBalanced(t, b, DefaultWindow)
	}
	if got := b.Add(frag(99, run, 0, 10), 99, 99).Error(); got != "builder: fragment from unknown source 99" {
		t.Errorf("unknown source message %q", got)
	}

	s := b.Stats()
	want := Stats{Received: 19, InEvents: 5, Pending: 0, Duplicate: 3, Late: 3, Malformed: 5, UnknownSource: 2, OutOfTime: 1,
		MalformedRun: 1, MalformedBcid: 2, MalformedChecksum: 2, EventsComplete: 2, EventsIncomplete: 1,
		Open: 1, Waiting: 0, Live: 2, WatermarkNs: clk.Nominal(0, 200), ClosedNs: clk.Nominal(0, 200) - 1000}
	if s != want {
		t.Errorf("stats\n got %+v\nwant %+v", s, want)
	}
	s1, _ := b.SourceStats(1)
	s2, _ := b.SourceStats(2)
	// Duplicate and late fragments are valid and keep their source alive;
	// malformed and out-of-time ones do not.
	w1 := SourceStats{Received: 10, InEvents: 3, Duplicate: 3, Late: 1, Malformed: 3, MalformedRun: 1, MalformedBcid: 1, MalformedChecksum: 1,
		WatermarkNs: clk.Nominal(0, 200), LastArrivalNs: 17, Alive: true}
	w2 := SourceStats{Received: 6, InEvents: 2, Late: 2, Malformed: 1, MalformedBcid: 1, OutOfTime: 1, Missing: 1,
		WatermarkNs: clk.Nominal(0, 200), LastArrivalNs: 15, Alive: true}
	if s1 != w1 {
		t.Errorf("source 1\n got %+v\nwant %+v", s1, w1)
	}
	if s2 != w2 {
		t.Errorf("source 2\n got %+v\nwant %+v", s2, w2)
	}
	if _, ok := b.SourceStats(99); ok {
		t.Error("SourceStats of an unknown source reported ok")
	}
	ev := c.take()
	if len(ev) != 3 || ev[0].Bcid != 12 || len(ev[0].Missing) != 0 || ev[1].Bcid != 20 || !slices.Equal(ev[1].Missing, []uint32{2}) ||
		ev[2].Bcid != 200 || len(ev[2].Missing) != 0 {
		t.Errorf("events %v", ev)
	}
	// The unstamped fragment travels unchanged.
	if ev[0].Stamps[0] != 0 {
		t.Errorf("stamps %v", ev[0].Stamps)
	}

	if err := b.Add(nil, 0, 0); !errors.Is(err, ErrMalformed) {
		t.Errorf("Add(nil): %v", err)
	}
	if b.Stats() != s {
		t.Error("Add(nil) changed the accounting")
	}
}

func TestSkipChecksum(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1}, SkipChecksum: true})
	f := frag(1, 0, 3, 4)
	f.Checksum++
	if err := b.Add(f, 0, 0); err != nil {
		t.Fatalf("SkipChecksum still checks: %v", err)
	}
	if len(c.take()) != 1 {
		t.Error("no event")
	}
}

func TestFlush(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2, 3}})
	for _, bc := range []uint32{30, 10, 20} {
		if err := b.Add(frag(1, 0, 0, bc), 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	b.Add(frag(2, 0, 0, 10), 0, 0)
	b.Flush()
	ev := c.take()
	fl := uint32(pb.EventFlag_EVENT_FLAG_FLUSHED | pb.EventFlag_EVENT_FLAG_INCOMPLETE)
	if len(ev) != 3 || ev[0].Bcid != 10 || ev[1].Bcid != 20 || ev[2].Bcid != 30 ||
		!slices.Equal(ev[0].Missing, []uint32{3}) || !slices.Equal(ev[2].Missing, []uint32{2, 3}) || ev[0].Flags != fl {
		t.Fatalf("flushed %v", ev)
	}
	s := b.Stats()
	if s.Open != 0 || s.Pending != 0 || s.EventsFlushed != 3 || s.EventsIncomplete != 3 {
		t.Errorf("after flush %+v", s)
	}
	// After the flush nothing up to the newest crossing reopens.
	if err := b.Add(frag(3, 0, 0, 20), 0, 0); !errors.Is(err, ErrLate) {
		t.Errorf("straggler after flush: %v", err)
	}
	if err := b.Add(frag(3, 0, 0, 31), 0, 0); err != nil {
		t.Errorf("new crossing after flush: %v", err)
	}
	checkBalanced(t, b, DefaultWindow)
}

func TestCallbackMustNotReenter(t *testing.T) {
	var b *Builder
	reenter := true
	b, err := New(Config{Sources: []uint32{1}}, func(*Event) {
		if reenter {
			reenter = false
			b.Advance(0)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		if recover() == nil {
			t.Error("reentrant call did not panic")
		}
		// The builder is still usable after the panic was recovered.
		if err := b.Add(frag(1, 0, 0, 2), 0, 0); err != nil {
			t.Errorf("after recovery: %v", err)
		}
	}()
	b.Add(frag(1, 0, 0, 1), 0, 0)
}

// A Builder that resumes a run after another one flushed it builds each
// crossing once between them: what the first emitted is late for the
// second, and the crossings after it are built as usual.
func TestResumeAfterFlush(t *testing.T) {
	cfg := Config{Sources: []uint32{1, 2}}
	first, c1 := newBuilder(t, cfg)
	for _, f := range []*pb.Fragment{frag(1, 0, 0, 10), frag(2, 0, 0, 10), frag(1, 0, 0, 20)} {
		if err := first.Add(f, 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	first.Flush()
	closed := first.Stats().ClosedNs

	second, c2 := newBuilder(t, cfg)
	second.Resume(closed)
	second.Resume(closed - 1000) // never moves back
	if err := second.Add(frag(2, 0, 0, 20), 0, 0); !errors.Is(err, ErrLate) {
		t.Fatalf("the rest of a crossing the first builder emitted: %v, want late", err)
	}
	for _, f := range []*pb.Fragment{frag(1, 0, 0, 30), frag(2, 0, 0, 30)} {
		if err := second.Add(f, 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	seen := map[uint32]int{}
	for _, ev := range append(c1.take(), c2.take()...) {
		seen[ev.Bcid]++
	}
	if len(seen) != 3 || seen[10] != 1 || seen[20] != 1 || seen[30] != 1 {
		t.Fatalf("crossings emitted %v, want 10, 20 and 30 once each", seen)
	}
	if s := second.Stats(); s.Late != 1 || s.EventsComplete != 1 || !s.Balanced() {
		t.Fatalf("second builder %+v", s)
	}
}
