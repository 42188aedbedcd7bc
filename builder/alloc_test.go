package builder

import "testing"

// TestSteadyStateDoesNotAllocate checks the hot path: accepting fragments,
// completing crossings, emitting events and forgetting old crossings, with
// checksums on, allocate nothing once the window is in steady state; nor
// does the watermark path with a dead source.
func TestSteadyStateDoesNotAllocate(t *testing.T) {
	if raceEnabled {
		t.Skip("the race detector allocates")
	}
	for _, skip := range []int{-1, 5} {
		r := newBenchRing(skip)
		ids := make([]uint32, benchSources)
		for i := range ids {
			ids[i] = uint32(i + 1)
		}
		events := 0
		b, err := New(Config{Run: 1, Sources: ids, DeadAfter: 1000}, func(*Event) { events++ })
		if err != nil {
			t.Fatal(err)
		}
		arrival := int64(0)
		feed := func() {
			r.shift += ringCrossings // restamping allocates nothing either
			r.stamp()
			for _, f := range r.frags {
				if err := b.Add(f, arrival, arrival); err != nil {
					t.Fatal(err)
				}
				arrival++
			}
		}
		feed() // warm up
		if n := testing.AllocsPerRun(2, feed); n != 0 {
			t.Errorf("skip %d: %v allocations for %d fragments", skip, n, len(r.frags))
		}
		if events < ringCrossings {
			t.Errorf("skip %d: only %d events", skip, events)
		}
	}
}
