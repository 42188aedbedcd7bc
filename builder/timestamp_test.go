package builder

import (
	"errors"
	"slices"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// stamped returns a sealed fragment carrying only a timestamp.
func stamped(src uint32, ts int64) *pb.Fragment {
	f := &pb.Fragment{SourceId: src, TimestampNs: ts}
	f.Seal()
	return f
}

func TestByTimestamp(t *testing.T) {
	clk := detector.DefaultClock()
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2, 3}, Mode: ByTimestamp})
	const x = 2*detector.SlotsPerOrbit + 1000 // crossing orbit 2, bcid 1000
	tx := clk.Nominal(2, 1000)

	// One millisecond at the 40.079 MHz crossing rate (3564 slots x
	// 11.2455 kHz, LHC Design Report vol. I, from memory) is 40079.1
	// slots: a fragment stamped 1 ms later belongs 40079 crossings on.
	far := uint64(x + 40079)
	tFar := clk.Nominal(far/detector.SlotsPerOrbit, uint32(far%detector.SlotsPerOrbit))
	if d := tx + 1_000_000 - tFar; d < -5 || d > 5 {
		t.Fatalf("1 ms after crossing %d is %d ns from crossing %d; the test needs it within the tolerance", x, d, far)
	}

	steps := []struct {
		name string
		f    *pb.Fragment
		want error
	}{
		{"3 ns after the crossing joins it", stamped(1, tx+3), nil},
		{"5 ns before joins it (tolerance 5 ns)", stamped(2, tx-5), nil},
		{"6 ns off is out of time", stamped(3, tx+6), ErrOutOfTime},
		{"half a slot off is out of time", stamped(3, tx+12), ErrOutOfTime},
		{"1 ms + 12 ns off is between far slots: out of time", stamped(3, tx+1_000_012), ErrOutOfTime},
		{"1 ms later lands in its own far crossing", stamped(3, tx+1_000_000), nil},
		{"before the first slot", stamped(3, -100), ErrOutOfTime},
		{"beyond the times the builder handles", stamped(3, 1<<62), ErrOutOfTime},
	}
	for _, st := range steps {
		err := b.Add(st.f, 0, 0)
		if st.want == nil && err != nil || st.want != nil && !errors.Is(err, st.want) {
			t.Fatalf("%s: %v, want %v", st.name, err, st.want)
		}
	}
	if len(c.events) != 0 {
		t.Fatalf("events %v before crossing %d was complete", c.events, x)
	}
	if err := b.Add(stamped(3, tx), 0, 0); err != nil {
		t.Fatal(err)
	}
	ev := c.take()
	if len(ev) != 1 || ev[0].Orbit != 2 || ev[0].Bcid != 1000 || ev[0].TimestampNs != tx ||
		!slices.Equal(ev[0].Sources, []uint32{1, 2, 3}) || !slices.Equal(ev[0].Stamps, []int64{tx + 3, tx - 5, tx}) {
		t.Fatalf("crossing: %v", ev)
	}
	b.Flush()
	ev = c.take()
	if len(ev) != 1 || ev[0].key() != far || !slices.Equal(ev[0].Sources, []uint32{3}) || !slices.Equal(ev[0].Missing, []uint32{1, 2}) {
		t.Fatalf("far crossing: %v", ev)
	}
	if s3, _ := b.SourceStats(3); s3.OutOfTime != 5 {
		t.Errorf("source 3: %+v", s3)
	}
	checkBalanced(t, b, DefaultWindow)
}

func TestByTimestampChecksCounters(t *testing.T) {
	clk := detector.DefaultClock()
	tx := clk.Nominal(4, 7)
	withCounters := func(src uint32, orbit uint64, bcid uint32) *pb.Fragment {
		f := &pb.Fragment{SourceId: src, Orbit: orbit, Bcid: bcid, TimestampNs: tx}
		f.Seal()
		return f
	}
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, Mode: ByTimestamp})
	if err := b.Add(withCounters(1, 4, 7), 0, 0); err != nil {
		t.Fatalf("matching counters: %v", err)
	}
	err := b.Add(withCounters(2, 4, 8), 0, 0)
	if !errors.Is(err, ErrOutOfTime) || !strings.Contains(err.Error(), "counters") {
		t.Fatalf("counters off by one: %v", err)
	}
	if err := b.Add(withCounters(2, 4, 4000), 0, 0); !errors.Is(err, ErrMalformed) {
		t.Fatalf("bcid out of range: %v", err)
	}
	if err := b.Add(withCounters(2, 0, 0), 0, 0); err != nil {
		t.Fatalf("no counters: %v", err)
	}
	if ev := c.take(); len(ev) != 1 || ev[0].Orbit != 4 || ev[0].Bcid != 7 {
		t.Fatalf("events %v", ev)
	}

	// Counters not trusted: ignored.
	b, c = newBuilder(t, Config{Sources: []uint32{1, 2}, Mode: ByTimestamp, IgnoreCounters: true})
	b.Add(withCounters(1, 99, 4000), 0, 0)
	b.Add(withCounters(2, 4, 8), 0, 0)
	if ev := c.take(); len(ev) != 1 || ev[0].Orbit != 4 || ev[0].Bcid != 7 {
		t.Fatalf("ignoring counters: %v, stats %+v", ev, b.Stats())
	}
}

// In ByCounter mode the timestamp is checked against the counters: a
// fragment stamped a millisecond off its bcid is out of time, never merged.
func TestByCounterChecksTimestamp(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}})
	b.Add(frag(1, 0, 6, 500), 0, 0)
	f := frag(2, 0, 6, 500)
	f.TimestampNs += 1_000_000
	f.Seal()
	err := b.Add(f, 0, 0)
	var fe *FragmentError
	if !errors.As(err, &fe) || fe.Reason != ReasonOutOfTime || fe.NominalNs != detector.DefaultClock().Nominal(6, 500) {
		t.Fatalf("1 ms off: %v", err)
	}
	if !strings.Contains(err.Error(), "1000000 ns from crossing orbit 6 bcid 500") {
		t.Errorf("message %q", err)
	}
	b.Flush()
	if ev := c.take(); len(ev) != 1 || !slices.Equal(ev[0].Missing, []uint32{2}) {
		t.Fatalf("events %v", ev)
	}
}
