package builder

import (
	"errors"
	"slices"
	"testing"
)

// crossingBcid spaces test crossings 10 slots apart inside orbit 3.
func crossingBcid(k int) uint32 { return uint32(10 * k) }

func TestDeadSourceLeavesAndComesBack(t *testing.T) {
	const deadAfter = 1_000_000 // 1 ms of arrival time
	const step = 10_000         // arrival time between crossings
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2, 3, 4}, Lateness: 1000, DeadAfter: deadAfter})
	now := int64(0)
	sendAt := func(k int, at int64, srcs ...uint32) {
		t.Helper()
		now = at
		for _, s := range srcs {
			if err := b.Add(frag(s, 0, 3, crossingBcid(k)), at, 0); err != nil {
				t.Fatalf("crossing %d source %d: %v", k, s, err)
			}
		}
	}
	for k := range 10 {
		sendAt(k, int64(k*step), 1, 2, 3, 4)
	}
	// Source 4 falls silent after crossing 9 (arrival 90 us). While it
	// counts as alive its watermark holds every later crossing back.
	for k := 10; k < 60; k++ {
		sendAt(k, int64(k*step), 1, 2, 3)
	}
	if ev := c.take(); len(ev) != 10 {
		t.Fatalf("%d events while source 4 held the watermark, want the 10 complete ones", len(ev))
	}
	b.Advance(9*step + deadAfter) // silent exactly DeadAfter: still alive
	if len(c.events) != 0 || !b.Alive(4) {
		t.Fatal("source 4 dead before DeadAfter had passed")
	}
	b.Advance(9*step + deadAfter + 1)
	if b.Alive(4) || b.Stats().Live != 3 {
		t.Fatal("source 4 still alive after DeadAfter")
	}
	dead := c.take()
	if len(dead) == 0 {
		t.Fatal("no events once source 4 was dead")
	}
	// Then 40 more crossings without source 4, and then source 4 is back.
	for k := 60; k < 100; k++ {
		sendAt(k, now+step, 1, 2, 3)
	}
	if b.Alive(4) {
		t.Fatal("source 4 alive without sending")
	}
	for k := 100; k < 120; k++ {
		sendAt(k, now+step, 1, 2, 3, 4)
		if !b.Alive(4) {
			t.Fatal("source 4 not alive after sending again")
		}
	}
	b.Flush()
	all := append(dead, c.take()...)
	seen := map[uint32]bool{}
	for _, e := range all {
		k := int(e.Bcid / 10)
		if seen[e.Bcid] {
			t.Fatalf("crossing %d emitted twice", k)
		}
		seen[e.Bcid] = true
		switch {
		case k >= 10 && k < 100:
			if !slices.Equal(e.Missing, []uint32{4}) || !slices.Equal(e.Sources, []uint32{1, 2, 3}) {
				t.Errorf("crossing %d while source 4 was silent: %v", k, e)
			}
			if e.Flags&flushedFlag != 0 {
				t.Errorf("crossing %d needed the flush: %v", k, e)
			}
		case k >= 100:
			if len(e.Missing) != 0 || e.Flags != 0 {
				t.Errorf("crossing %d after source 4 came back: %v", k, e)
			}
		}
	}
	if len(seen) != 110 {
		t.Errorf("%d crossings emitted after the first 10, want 110", len(seen))
	}
	s4, _ := b.SourceStats(4)
	if s4.Deaths != 1 || !s4.Alive || s4.Missing != 90 || s4.InEvents != 30 {
		t.Errorf("source 4: %+v", s4)
	}
	checkBalanced(t, b, DefaultWindow)
}

func TestSourceThatNeverSends(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, Lateness: 1000, DeadAfter: 500})
	for k := range 20 {
		if err := b.Add(frag(1, 0, 0, crossingBcid(k)), int64(100*k), 0); err != nil {
			t.Fatal(err)
		}
		if k < 5 && len(c.events) != 0 {
			t.Fatalf("crossing %d: event before source 2 was dead", k)
		}
	}
	// Source 2 was dead 500 ns after the first arrival; source 1 alone
	// moves the watermark since.
	if b.Alive(2) || !b.Alive(1) {
		t.Fatal("liveness")
	}
	ev := c.take()
	if len(ev) == 0 {
		t.Fatal("no events")
	}
	for _, e := range ev {
		if !slices.Equal(e.Missing, []uint32{2}) {
			t.Errorf("event %v", e)
		}
	}
}

func TestEveryoneDead(t *testing.T) {
	b, c := newBuilder(t, Config{Sources: []uint32{1, 2}, Lateness: 100_000, DeadAfter: 1000})
	for _, bc := range []uint32{10, 20} {
		if err := b.Add(frag(1, 0, 0, bc), 0, 0); err != nil {
			t.Fatal(err)
		}
	}
	b.Advance(1000)
	if len(c.events) != 0 {
		t.Fatal("emitted before anyone was dead")
	}
	b.Advance(1001)
	ev := c.take()
	// Nothing can move the watermark any more: every open crossing leaves,
	// oldest first, incomplete, not flushed.
	if len(ev) != 2 || ev[0].Bcid != 10 || ev[1].Bcid != 20 || !slices.Equal(ev[0].Missing, []uint32{2}) || ev[0].Flags != incompleteFlag {
		t.Fatalf("events %v", ev)
	}
	if s := b.Stats(); s.Live != 0 || s.Waiting != 0 || s.Open != 2 || s.Pending != 0 {
		t.Errorf("stats %+v", s)
	}
	// The crossings are remembered: a straggler is late, not a new event,
	// and its source is alive again.
	if err := b.Add(frag(2, 0, 0, 10), 2000, 0); !errors.Is(err, ErrLate) {
		t.Errorf("straggler: %v", err)
	}
	if err := b.Add(frag(1, 0, 0, 10), 2000, 0); !errors.Is(err, ErrDuplicate) {
		t.Errorf("repeat: %v", err)
	}
	if !b.Alive(1) || !b.Alive(2) {
		t.Error("sources not alive after sending")
	}
	if err := b.Add(frag(2, 0, 0, 30), 2000, 0); err != nil {
		t.Errorf("new crossing: %v", err)
	}
	if err := b.Add(frag(1, 0, 0, 30), 2000, 0); err != nil {
		t.Errorf("new crossing: %v", err)
	}
	if ev := c.take(); len(ev) != 1 || ev[0].Bcid != 30 || len(ev[0].Missing) != 0 {
		t.Errorf("after coming back: %v", ev)
	}
	checkBalanced(t, b, DefaultWindow)
}
