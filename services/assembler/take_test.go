package assembler

import (
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// batchOf returns an encoded batch of source src with one sealed fragment
// per bcid (orbit 0, run 1), as a NATS message.
func batchOf(t *testing.T, src uint32, end bool, bcids ...uint32) *nats.Msg {
	t.Helper()
	b := &pb.FragmentBatch{SourceId: src, Run: 1, EndOfRun: end, SentUnixNs: 1}
	for _, bc := range bcids {
		f := &pb.Fragment{SourceId: src, Run: 1, Bcid: bc, TimestampNs: detector.DefaultClock().Nominal(0, bc),
			Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{src}, EtCounts: []uint32{7}}}}
		f.Seal()
		b.Fragments = append(b.Fragments, f)
	}
	data, err := proto.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	return &nats.Msg{Subject: "test", Data: data}
}

// newTestAssembler returns a builder service with a tick that never fires,
// fed by calling takeLocked.
func newTestAssembler(t *testing.T, bc builder.Config) *Assembler {
	t.Helper()
	a, err := New(Config{Builder: bc, Tick: time.Hour, Subjects: transport.Subjects{Prefix: "test"}}, embeddedConn(t, "test"), prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// With policy Block, fragments the window has no room for wait in the
// service and go in once the crossings before them are done; none is lost
// from the accounting, and every crossing reported is built.
func TestBlockHoldsRefusedFragments(t *testing.T) {
	a := newTestAssembler(t, builder.Config{Run: 1, Sources: []uint32{1, 2}, Window: 2, WhenFull: builder.Block, Lateness: 25})
	a.mu.Lock()
	defer a.mu.Unlock()
	// Source 1 runs a crossing ahead of what the window holds.
	a.takeLocked(batchOf(t, 1, false, 10, 20, 30), 1000)
	if a.b.Stats().Received != 2 || len(a.held) != 1 {
		t.Fatalf("received %d, held %d: want 2 in the window and 30 waiting", a.b.Stats().Received, len(a.held))
	}
	// Source 2 completes 10 and 20; the waiting fragment then goes in.
	a.takeLocked(batchOf(t, 2, false, 10, 20), 2000)
	a.takeLocked(batchOf(t, 2, false, 30), 3000)
	s := a.b.Stats()
	if len(a.held) != 0 || s.Received != 6 || s.EventsComplete != 3 || !s.Balanced() {
		t.Fatalf("held %d, stats %+v: want all 6 fragments in 3 complete events", len(a.held), s)
	}
}

// Fragments still waiting when the run ends are offered after the flush
// and counted: the accounting closes.
func TestBlockHeldFragmentsCountedAtTheEnd(t *testing.T) {
	a := newTestAssembler(t, builder.Config{Run: 1, Sources: []uint32{1, 2}, Window: 2, WhenFull: builder.Block, Lateness: 25})
	a.mu.Lock()
	a.takeLocked(batchOf(t, 1, false, 10, 20, 30, 40), 1000)
	if len(a.held) != 2 {
		t.Fatalf("held %d, want 30 and 40", len(a.held))
	}
	a.b.Flush()
	a.retryHeldLocked(2000)
	a.b.Flush()
	s := a.b.Stats()
	a.mu.Unlock()
	if len(a.held) != 0 || s.Received != 4 || !s.Balanced() || s.EventsComplete+s.EventsIncomplete+s.Late != 4 {
		t.Fatalf("held %d, stats %+v: want all 4 fragments accounted for", len(a.held), s)
	}
}

// Block holds fragments back only up to its limit (a window's worth per
// source): beyond it the oldest crossings are evicted to let the held
// fragments in, and nothing is lost from the accounting.
func TestBlockEvictsBeyondTheHeldLimit(t *testing.T) {
	a := newTestAssembler(t, builder.Config{Run: 1, Sources: []uint32{1, 2}, Window: 2, WhenFull: builder.Block, Lateness: 25})
	if a.heldLimit != 4 {
		t.Fatalf("held limit %d, want the window of 2 x 2 sources", a.heldLimit)
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	bcids := []uint32{10, 20, 30, 40, 50, 60, 70, 80, 90, 100}
	a.takeLocked(batchOf(t, 1, false, bcids...), 1000)
	if len(a.held) > a.heldLimit/2 {
		t.Fatalf("%d held after the limit was reached, want at most %d", len(a.held), a.heldLimit/2)
	}
	s := a.b.Stats()
	if s.EventsEvicted == 0 || uint64(len(a.held))+s.Received != 10 {
		t.Fatalf("held %d, stats %+v: want crossings evicted and all 10 fragments in or held", len(a.held), s)
	}
	a.takeLocked(batchOf(t, 2, false, bcids...), 2000)
	a.b.Flush()
	a.retryHeldLocked(3000)
	a.b.Flush()
	s = a.b.Stats()
	if len(a.held) != 0 || s.Received != 20 || !s.Balanced() || s.EventsComplete+s.EventsIncomplete != 10 {
		t.Fatalf("held %d, stats %+v: want 20 fragments accounted for and every crossing built once", len(a.held), s)
	}
}

// Only the expected sources' end-of-run markers count towards the end of
// the run: a stray marker must not end it while sources still send.
func TestStrayEndMarkerDoesNotEndTheRun(t *testing.T) {
	a := newTestAssembler(t, builder.Config{Run: 1, Sources: []uint32{1, 2}})
	a.mu.Lock()
	a.takeLocked(batchOf(t, 1, true, 10), 1000)
	a.takeLocked(batchOf(t, 99, true), 1000)
	a.mu.Unlock()
	select {
	case <-a.done:
		t.Fatal("the run ended on source 99's marker; source 2 has not ended")
	default:
	}
	a.mu.Lock()
	a.takeLocked(batchOf(t, 2, true, 10), 1000)
	a.mu.Unlock()
	select {
	case <-a.done:
	default:
		t.Fatal("the run did not end after both sources' markers")
	}
}

// A fragment whose bytes do not decode costs its batch nothing else: it
// is counted malformed under the batch's source, its siblings go in.
func TestUndecodableFragmentKeepsItsSiblings(t *testing.T) {
	a := newTestAssembler(t, builder.Config{Run: 1, Sources: []uint32{1, 2}})
	m := batchOf(t, 1, false, 10, 20, 30)
	// A fragments field (5) of two bytes that are not a valid tag.
	m.Data = append(m.Data, 5<<3|2, 2, 0xff, 0xff)
	a.mu.Lock()
	a.takeLocked(m, 1000)
	s := a.b.Stats()
	src, _ := a.b.SourceStats(1)
	a.mu.Unlock()
	if a.undecoded != 0 || s.Received != 4 || s.Malformed != 1 || src.Malformed != 1 || s.Pending != 3 || !s.Balanced() {
		t.Fatalf("undecodable batches %d, stats %+v, source 1 %+v: want the batch kept, 3 fragments pending and 1 malformed of source 1", a.undecoded, s, src)
	}
}
