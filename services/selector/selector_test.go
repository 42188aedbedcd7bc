package selector

import (
	"io/fs"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	dto "github.com/prometheus/client_model/go"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

func starter(t *testing.T, replace ...string) *trigger.Menu {
	t.Helper()
	data, err := fs.ReadFile(examples.FS, examples.StarterMenu)
	if err != nil {
		t.Fatal(err)
	}
	text := string(data)
	for i := 0; i+1 < len(replace); i += 2 {
		text = strings.Replace(text, replace[i], replace[i+1], 1)
	}
	m, err := trigger.ParseMenu("starter.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// A menu loaded during a run takes effect at the first event of the next
// lumi slice, no earlier and no later, even when late events of the old
// slice still arrive.
func TestLoadMenuAtLumiSliceBoundary(t *testing.T) {
	old := starter(t)
	next := starter(t, "met > 120 GeV", "met > 150 GeV")
	s, err := New(Config{Menu: old, Geometry: detector.Lantern(), BatchDecisions: 1 << 30}, nil, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	decide := func(slice uint32) string {
		s.mu.Lock()
		defer s.mu.Unlock()
		s.decide(&pb.BuiltEvent{LumiSlice: slice})
		return s.out.Decisions[len(s.out.Decisions)-1].MenuHash
	}
	if h := decide(3); h != old.Hash {
		t.Fatalf("first event decided with %s", h)
	}
	if err := s.LoadMenu(next, ""); err != nil {
		t.Fatal(err)
	}
	if h, after := s.PendingMenu(); h != next.Hash || after != 3 {
		t.Fatalf("pending %s after slice %d", h, after)
	}
	for _, slice := range []uint32{3, 2, 3} {
		if h := decide(slice); h != old.Hash {
			t.Fatalf("event of slice %d decided with the new menu before the boundary", slice)
		}
	}
	if h := decide(4); h != next.Hash {
		t.Fatalf("first event of slice 4 decided with %s, want the new menu", h)
	}
	if h := decide(3); h != next.Hash {
		t.Fatalf("after the switch, a late event went back to the old menu")
	}
	if h, _ := s.PendingMenu(); h != "" {
		t.Fatalf("still pending: %s", h)
	}
	bad := starter(t)
	if err := s.LoadMenu(bad, "no-such-set"); err == nil {
		t.Fatal("an unknown prescale set must be refused")
	}
}

// Deciding a batch observes one selection time per event, read from one
// clock reading per event: the times are positive and add up to no more
// than the batch took; every event with a readout time gets an end-to-end
// latency.
func TestBatchTimesEachEvent(t *testing.T) {
	t.Run("no publishing", func(t *testing.T) { checkBatchTimes(t, nil, 1<<30) })
	// Decision batches of 7 go out in the middle of event batches.
	t.Run("publishing every 7 decisions", func(t *testing.T) { checkBatchTimes(t, embeddedSelectorConn(t), 7) })
}

func checkBatchTimes(t *testing.T, nc *nats.Conn, batch int) {
	s := newTestSelector(t, nc, Config{BatchDecisions: batch})
	batches := sampleEvents(t, 300, 50, 3)
	var events uint64
	var took time.Duration
	for _, data := range batches {
		s.mu.Lock()
		start := time.Now()
		if _, err := s.decideBatch(data); err != nil {
			t.Fatal(err)
		}
		took += time.Since(start)
		s.mu.Unlock()
		if !s.clock.IsZero() {
			t.Fatal("the batch clock outlives the batch")
		}
	}
	events = s.events
	if events != 300 {
		t.Fatalf("%d events decided, want 300", events)
	}
	var m dto.Metric
	if err := s.m.latency.Write(&m); err != nil {
		t.Fatal(err)
	}
	h := m.GetHistogram()
	if h.GetSampleCount() != events {
		t.Fatalf("%d selection times observed, want %d", h.GetSampleCount(), events)
	}
	if sum := h.GetSampleSum(); sum <= 0 || sum > took.Seconds() {
		t.Fatalf("selection times add up to %g s, want more than 0 and at most the %g s the batches took", sum, took.Seconds())
	}
	withReadout := uint64(0)
	for _, data := range batches {
		var b pb.EventBatch
		if err := proto.Unmarshal(data, &b); err != nil {
			t.Fatal(err)
		}
		for _, be := range b.Events {
			if be.ReadoutUnixNs > 0 {
				withReadout++
			}
		}
	}
	if got := s.EndToEnd.Count(); got != withReadout {
		t.Fatalf("%d end-to-end latencies, want %d (events with a readout time)", got, withReadout)
	}
}

// embeddedSelectorConn returns an in-process connection to an embedded
// server that lives as long as the test.
func embeddedSelectorConn(t *testing.T) *nats.Conn {
	t.Helper()
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	nc, err := transport.ConnectInProcess(srv, "t")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// Once every builder has announced the end of the run, events still
// missing from their totals are waited for EndWait after the last event
// decided, then given up for lost: the run ends instead of hanging.
func TestMissingEventsGivenUpAfterEndWait(t *testing.T) {
	for _, worker := range []int{0, 1} {
		s := newTestSelector(t, nil, Config{EndWait: 5 * time.Second, Worker: worker, Workers: 2})
		t0 := time.Unix(1000, 0)
		s.mu.Lock()
		s.builderEnds[0] = 10 // one builder announced 10 events
		s.seen, s.others[1-worker] = 4, 3
		s.giveUpLocked(t0)
		s.giveUpLocked(t0.Add(4 * time.Second))
		s.seen++ // an event decided late restarts the wait
		s.giveUpLocked(t0.Add(4500 * time.Millisecond))
		s.giveUpLocked(t0.Add(9 * time.Second))
		s.mu.Unlock()
		select {
		case <-s.finished:
			t.Fatalf("worker %d: ended before EndWait had passed since the last decision", worker)
		default:
		}
		s.mu.Lock()
		s.giveUpLocked(t0.Add(9600 * time.Millisecond))
		s.mu.Unlock()
		select {
		case <-s.finished:
		default:
			t.Fatalf("worker %d: still waiting after EndWait", worker)
		}
		// Worker 0 counts the events missing from all workers together,
		// once, however often the tick comes before the run ends.
		s.mu.Lock()
		s.giveUpLocked(t0.Add(20 * time.Second))
		s.mu.Unlock()
		want := map[int]uint64{0: 2, 1: 0}[worker]
		if s.EventsLost() != want {
			t.Fatalf("worker %d counted %d lost, want %d", worker, s.EventsLost(), want)
		}
		var m dto.Metric
		if err := s.m.lost.Write(&m); err != nil || m.GetCounter().GetValue() != float64(want) {
			t.Fatalf("worker %d: bunchsieve_selection_events_lost_total %v (%v), want %d", worker, m.GetCounter().GetValue(), err, want)
		}
	}
}
