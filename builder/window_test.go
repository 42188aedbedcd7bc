package builder

import (
	"errors"
	"math/rand/v2"
	"slices"
	"testing"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

func TestEvictOldest(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, Window: 4})
	for _, bc := range []uint32{10, 20, 30, 40} {
		if err := b.Add(frag(1, 0, 0, bc), 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	if len(c.events) != 0 || b.Stats().Open != 4 {
		t.Fatalf("events %v, stats %+v", c.events, b.Stats())
	}
	// A fifth crossing pushes the oldest out, incomplete and evicted.
	if err := b.Add(frag(1, 0, 0, 50), 0, 0); err != nil {
		t.Fatal(err)
	}
	ev := c.take()
	evicted := incompleteFlag | evictedFlag
	if len(ev) != 1 || ev[0].Bcid != 10 || ev[0].Flags != evicted || !slices.Equal(ev[0].Missing, []uint32{2}) {
		t.Fatalf("evicted %v", ev)
	}
	if s := b.Stats(); s.Open != 4 || s.EventsEvicted != 1 || s.EventsIncomplete != 1 {
		t.Fatalf("stats %+v", s)
	}
	// Its straggler is late, not a second event.
	if err := b.Add(frag(2, 0, 0, 10), 0, 0); !errors.Is(err, ErrLate) {
		t.Fatalf("straggler of an evicted crossing: %v", err)
	}
	// A new crossing older than everything tracked is itself the oldest:
	// it leaves at once, evicted, with its one fragment.
	if err := b.Add(frag(2, 0, 0, 15), 0, 0); err != nil {
		t.Fatal(err)
	}
	if ev := c.take(); len(ev) != 1 || ev[0].Bcid != 15 || !slices.Equal(ev[0].Sources, []uint32{2}) || ev[0].Flags != evicted {
		t.Fatalf("oldest new crossing: %v", ev)
	}
	if s := b.Stats(); s.Open != 4 || s.Waiting != 4 || s.EventsEvicted != 2 {
		t.Fatalf("stats %+v", s)
	}

	// An emitted crossing that is the oldest is forgotten without an event.
	if err := b.Add(frag(2, 0, 0, 20), 0, 0); err != nil { // 20 complete, remembered
		t.Fatal(err)
	}
	if ev := c.take(); len(ev) != 1 || ev[0].Bcid != 20 || ev[0].Flags != 0 {
		t.Fatalf("complete: %v", ev)
	}
	if err := b.Add(frag(1, 0, 0, 60), 0, 0); err != nil {
		t.Fatal(err)
	}
	if ev := c.take(); len(ev) != 0 {
		t.Fatalf("forgetting a remembered crossing emitted %v", ev)
	}
	if err := b.Add(frag(2, 0, 0, 20), 0, 0); !errors.Is(err, ErrLate) {
		t.Fatalf("straggler of a forgotten crossing: %v", err)
	}
	if s := b.Stats(); s.Open != 4 || s.EventsEvicted != 2 {
		t.Fatalf("stats %+v", s)
	}
	checkBalanced(t, b, 4)
}

func TestBlock(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, Window: 3, WhenFull: Block, DeadAfter: 1000})
	for _, bc := range []uint32{10, 20, 30} {
		if err := b.Add(frag(1, 0, 0, bc), 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	before, src1 := b.Stats(), sourceStats(t, b, 1)
	f := frag(1, 0, 0, 40)
	err := b.Add(f, 0, 0)
	var fe *FragmentError
	if !errors.Is(err, ErrWindowFull) || !errors.As(err, &fe) || fe.Reason != ReasonWindowFull || fe.CrossingBcid != 40 {
		t.Fatalf("full window: %v", err)
	}
	// Refused, not consumed: nothing changed but the refusal count.
	after := b.Stats()
	before.WindowFullRefusals++
	if after != before || sourceStats(t, b, 1) != src1 {
		t.Fatalf("refusal changed the accounting:\n%+v\n%+v", before, after)
	}
	// Fragments for tracked crossings still go in; 10 completes and is
	// only remembered now, so the refused fragment fits when offered again.
	if err := b.Add(frag(2, 0, 0, 10), 0, 0); err != nil {
		t.Fatal(err)
	}
	if err := b.Add(f, 0, 0); err != nil {
		t.Fatalf("offered again: %v", err)
	}
	if s := b.Stats(); s.Open != 3 || s.WindowFullRefusals != 1 || s.Received != 5 || s.EventsComplete != 1 {
		t.Fatalf("stats %+v", s)
	}

	// Full of open crossings again; Advance past DeadAfter leaves no live
	// source, which emits them all and makes room.
	g := frag(1, 0, 0, 50)
	if err := b.Add(g, 0, 0); !errors.Is(err, ErrWindowFull) {
		t.Fatalf("full again: %v", err)
	}
	b.Advance(1001)
	if ev := c.take(); len(ev) != 4 || ev[3].Bcid != 40 || ev[3].Flags != incompleteFlag {
		t.Fatalf("events %v", ev)
	}
	if err := b.Add(g, 2000, 0); err != nil {
		t.Fatalf("after Advance: %v", err)
	}
	if s := b.Stats(); s.Open > 3 || s.WindowFullRefusals != 2 || s.EventsEvicted != 0 {
		t.Fatalf("stats %+v", s)
	}
	checkBalanced(t, b, 3)
}

// A source whose fragments the full window keeps refusing is sending: it
// is not declared dead while it does (a caller holding its fragments back
// would otherwise see it die), though its watermark does not move.
func TestBlockRefusedSourceStaysAlive(t *testing.T) {
	b, _ := newBuilder(t, Config{Sources: []uint32{1, 2, 3}, Window: 2, WhenFull: Block, Lateness: 1, DeadAfter: 1000})
	for _, bc := range []uint32{10, 20} {
		if err := b.Add(frag(1, 0, 0, bc), 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	wm := sourceStats(t, b, 1).WatermarkNs
	for now := int64(100); now <= 1000; now += 100 {
		for _, src := range []uint32{1, 2} {
			if err := b.Add(frag(src, 0, 0, 30), now, 0); !errors.Is(err, ErrWindowFull) {
				t.Fatalf("source %d at %d: %v, want the window full", src, now, err)
			}
		}
	}
	b.Advance(1050)
	if s := b.Stats(); s.Live != 2 {
		t.Fatalf("%d live sources after source 3's silence, want the refused sources 1 and 2: %+v", s.Live, s)
	}
	if got := sourceStats(t, b, 1).WatermarkNs; got != wm {
		t.Fatalf("source 1's watermark moved from %d to %d on refused fragments", wm, got)
	}
	checkBalanced(t, b, 3)
}

func sourceStats(t *testing.T, b *Builder, id uint32) SourceStats {
	t.Helper()
	s, ok := b.SourceStats(id)
	if !ok {
		t.Fatalf("no source %d", id)
	}
	return s
}

// TestWindowBound floods the builder with crossings far faster than they
// complete, under both policies, and checks after every call that the
// window holds and that nothing is lost: with Block every refused fragment
// is offered again later and ends counted like the others.
func TestWindowBound(t *testing.T) {
	for _, policy := range []Policy{EvictOldest, Block} {
		t.Run(policy.String(), func(t *testing.T) {
			const window = 16
			rng := rand.New(rand.NewPCG(8, uint64(policy)))
			b, c := newBuilder(t, Config{Sources: []uint32{1, 2, 3, 4}, Window: window, WhenFull: policy, Lateness: 500, DeadAfter: 5000})
			var queue []*pb.Fragment
			offered := 0
			now := int64(0)
			base := 0
			events := 0
			for i := range 20000 {
				now += int64(rng.IntN(40))
				var f *pb.Fragment
				if len(queue) > 0 && rng.IntN(3) == 0 {
					f, queue = queue[0], queue[1:]
				} else {
					base += rng.IntN(3)
					k := base + rng.IntN(200) // crossings spread wide: most never complete
					f = frag(uint32(1+rng.IntN(4)), 0, uint64(k/3000), uint32(k%3000))
					offered++
				}
				if err := b.Add(f, now, now); errors.Is(err, ErrWindowFull) {
					queue = append(queue, f)
				}
				if rng.IntN(50) == 0 {
					now += int64(rng.IntN(8000))
					b.Advance(now)
				}
				if s := b.Stats(); s.Open > window || !s.Balanced() {
					t.Fatalf("step %d: %+v", i, s)
				}
				events += len(c.take())
			}
			b.Flush()
			for _, f := range queue {
				if err := b.Add(f, now, now); errors.Is(err, ErrWindowFull) {
					t.Fatalf("refused after Flush: %v", err)
				}
			}
			b.Flush()
			events += len(c.take())
			s := b.Stats()
			t.Logf("offered %d: %+v", offered, s)
			if s.Received != uint64(offered) || s.Pending != 0 || s.Open != 0 {
				t.Fatalf("offered %d, stats %+v", offered, s)
			}
			if uint64(events) != s.EventsComplete+s.EventsIncomplete {
				t.Fatalf("%d events, stats %+v", events, s)
			}
			switch policy {
			case EvictOldest:
				if s.EventsEvicted == 0 || s.WindowFullRefusals != 0 {
					t.Fatalf("the flood never evicted: %+v", s)
				}
			case Block:
				if s.EventsEvicted != 0 || s.WindowFullRefusals == 0 {
					t.Fatalf("the flood never blocked: %+v", s)
				}
			}
			checkBalanced(t, b, window)
		})
	}
}
