package assembler

import (
	"context"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// sourced keeps the emulator's batches with their sources.
type sourced struct {
	sources []uint32
	batches [][]byte
}

func (c *sourced) Send(_ int, source uint32, _ int64, data []byte, _ int) error {
	c.sources = append(c.sources, source)
	c.batches = append(c.batches, append([]byte(nil), data...))
	return nil
}
func (c *sourced) Flush() error { return nil }

// oneCrossingBatches returns a stream of 16 sources in which every batch
// carries one crossing, as a readout publishing each fragment on its own
// does, end-of-run markers last; and the source ids.
func oneCrossingBatches(t *testing.T, crossings uint64) (*sourced, []uint32) {
	t.Helper()
	gen, part := toyGenerator(t, 9)
	var c sourced
	emu, err := emulator.New(emulator.Config{Crossings: crossings, BatchCrossings: 1}, gen, part.SourceIDs(), &c, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	if want := int(crossings+1) * 16; len(c.batches) != want {
		t.Fatalf("%d batches, want %d (one per crossing and source, and the markers)", len(c.batches), want)
	}
	return &c, part.SourceIDs()
}

// builtWatcher counts the events of every built-event batch, how often
// each crossing (by absolute slot) was built, and the totals the
// end-of-run batches announce.
type builtWatcher struct {
	mu     sync.Mutex
	sizes  []int
	events int
	counts map[uint64]int
	ends   []uint64
}

func watchBuilt(t *testing.T, nc *nats.Conn, s transport.Subjects) *builtWatcher {
	t.Helper()
	w := &builtWatcher{counts: map[uint64]int{}}
	if _, err := nc.Subscribe(s.Built(), func(m *nats.Msg) {
		var b pb.EventBatch
		if err := proto.Unmarshal(m.Data, &b); err != nil {
			t.Error(err)
			return
		}
		w.mu.Lock()
		defer w.mu.Unlock()
		if len(b.Events) > 0 {
			w.sizes = append(w.sizes, len(b.Events))
			w.events += len(b.Events)
		}
		for _, ev := range b.Events {
			w.counts[ev.Orbit*detector.SlotsPerOrbit+uint64(ev.Bcid)]++
		}
		if b.EndOfRun {
			w.ends = append(w.ends, b.EventsTotal)
		}
	}); err != nil {
		t.Fatal(err)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	return w
}

// waitEvents polls until n events have been seen and returns the batch
// sizes.
func (w *builtWatcher) waitEvents(t *testing.T, n int) []int {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for {
		w.mu.Lock()
		got, sizes := w.events, append([]int(nil), w.sizes...)
		w.mu.Unlock()
		if got >= n {
			return sizes
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d events arrived", got, n)
		}
		time.Sleep(time.Millisecond)
	}
}

func embeddedConn(t *testing.T, name string) *nats.Conn {
	t.Helper()
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	nc, err := transport.ConnectInProcess(srv, name)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// Fragment batches that queue up are taken together, and their events go
// out in full batches instead of one batch per completed crossing; with
// no linger a crossing that arrives alone goes out as soon as the queue
// is empty, without waiting for the tick.
func TestQueuedBatchesFillEventBatches(t *testing.T) {
	stream, sources := oneCrossingBatches(t, 200)
	nc := embeddedConn(t, "receive")
	subjects := transport.Subjects{Prefix: "receive"}
	w := watchBuilt(t, nc, subjects)
	a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Tick: time.Hour, Linger: -1, Subjects: subjects}, nc, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	in := make(chan *nats.Msg, len(stream.batches))
	drain := func() {
		for len(in) > 0 {
			a.receive(<-in, in)
		}
	}
	// 130 crossings queued at once: two full batches of 64 and the 2
	// left over once the queue has run empty.
	for _, data := range stream.batches[:130*16] {
		in <- &nats.Msg{Subject: "test", Data: data}
	}
	drain()
	if sizes := w.waitEvents(t, 130); len(sizes) != 3 || sizes[0] != 64 || sizes[1] != 64 || sizes[2] != 2 {
		t.Fatalf("batch sizes %v, want [64 64 2]", sizes)
	}
	// One crossing alone.
	for _, data := range stream.batches[130*16 : 131*16] {
		in <- &nats.Msg{Subject: "test", Data: data}
	}
	drain()
	if sizes := w.waitEvents(t, 131); len(sizes) != 4 || sizes[3] != 1 {
		t.Fatalf("batch sizes %v, want a fourth batch of 1", sizes)
	}
	if got := a.Emitted(); got != 131 {
		t.Fatalf("emitted %d events, want 131", got)
	}
	s := a.Stats()
	if s.Received != 131*16 || s.InEvents != 131*16 || s.EventsComplete != 131 {
		t.Fatalf("accounting %+v, want 131 complete events of 16 fragments", s)
	}
	for i, n := range a.bytesIn {
		if n == 0 {
			t.Fatalf("no bytes counted for source %d", sources[i])
		}
	}
}

// Run over NATS with one crossing per fragment batch: every crossing is
// built once, complete, and the run ends at the sources' markers.
func TestRunOneCrossingBatches(t *testing.T) {
	const crossings = 500
	stream, sources := oneCrossingBatches(t, crossings)
	nc := embeddedConn(t, "run")
	subjects := transport.Subjects{Prefix: "run"}
	w := watchBuilt(t, nc, subjects)
	a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Subjects: subjects}, nc, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	runToEnd(t, a, nc, subjects, stream)
	w.waitEvents(t, crossings)
	s := a.Stats()
	if a.Emitted() != crossings || s.EventsComplete != crossings || s.InEvents != crossings*16 || a.DroppedMessages() != 0 || a.UndecodableMessages() != 0 {
		t.Fatalf("emitted %d, accounting %+v, dropped %d, undecodable %d; want %d complete events", a.Emitted(), s, a.DroppedMessages(), a.UndecodableMessages(), crossings)
	}
	var bytes uint64
	for _, n := range a.bytesIn {
		bytes += n
	}
	var want uint64
	for _, data := range stream.batches {
		want += uint64(len(data))
	}
	if bytes != want {
		t.Fatalf("%d bytes counted, %d published", bytes, want)
	}
}

// A partly filled batch waits for more events while it is younger than
// Linger, even when the queue has run empty, and goes out with the next
// fragment batch taken after that; a full batch never waits.
func TestLingerHoldsYoungBatches(t *testing.T) {
	stream, sources := oneCrossingBatches(t, 200)
	nc := embeddedConn(t, "linger")
	subjects := transport.Subjects{Prefix: "linger"}
	w := watchBuilt(t, nc, subjects)
	newAssembler := func(linger time.Duration) *Assembler {
		a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Tick: time.Hour, Linger: linger, Subjects: subjects}, nc, prometheus.NewRegistry())
		if err != nil {
			t.Fatal(err)
		}
		return a
	}
	in := make(chan *nats.Msg, len(stream.batches))
	feed := func(a *Assembler, from, to int) {
		for _, data := range stream.batches[from*16 : to*16] {
			in <- &nats.Msg{Subject: "test", Data: data}
		}
		for len(in) > 0 {
			a.receive(<-in, in)
		}
	}
	flushed := func() int {
		if err := nc.Flush(); err != nil {
			t.Fatal(err)
		}
		w.mu.Lock()
		defer w.mu.Unlock()
		return w.events
	}

	// An hour's linger: 70 crossings give one full batch at once, and the
	// 6 left wait however often the queue runs empty.
	a := newAssembler(time.Hour)
	feed(a, 0, 70)
	if sizes := w.waitEvents(t, 64); len(sizes) != 1 || sizes[0] != 64 {
		t.Fatalf("batch sizes %v, want one full batch of 64", sizes)
	}
	feed(a, 70, 71)
	if got := flushed(); got != 64 || a.events != 7 {
		t.Fatalf("%d events published and %d waiting, want 64 and 7", got, a.events)
	}
	// Publishing (as the tick does) sends the young batch.
	a.mu.Lock()
	if err := a.publishLocked(false); err != nil {
		t.Fatal(err)
	}
	a.mu.Unlock()
	if sizes := w.waitEvents(t, 71); len(sizes) != 2 || sizes[1] != 7 {
		t.Fatalf("batch sizes %v, want [64 7]", sizes)
	}

	// A linger of 1 ns: the crossing taken alone waits (it was built after
	// the burst's clock reading), the next fragment batch finds it old.
	b := newAssembler(time.Nanosecond)
	feed(b, 100, 101)
	if got := flushed(); got != 71 || b.events != 1 {
		t.Fatalf("%d events published and %d waiting, want 71 and 1", got, b.events)
	}
	// The first fragment of the next crossing completes nothing; taking it
	// publishes the waiting event.
	in <- &nats.Msg{Subject: "test", Data: stream.batches[101*16]}
	b.receive(<-in, in)
	if sizes := w.waitEvents(t, 72); len(sizes) != 3 || sizes[2] != 1 || b.events != 0 {
		t.Fatalf("batch sizes %v, %d waiting; want a third batch of 1 and none waiting", sizes, b.events)
	}
}

// Run builds every crossing once, complete, and ends at the markers
// whether partly filled batches linger or not, up to the whole tick; a
// linger longer than the tick is refused.
func TestRunLingerSettings(t *testing.T) {
	if _, err := New(Config{Builder: builder.Config{Run: 1, Sources: []uint32{1}}, Linger: 3 * time.Millisecond}, nil, prometheus.NewRegistry()); err == nil ||
		!strings.Contains(err.Error(), "linger 3ms is longer than the tick 2ms") {
		t.Errorf("a linger past the tick: %v", err)
	}
	const crossings = 300
	stream, sources := oneCrossingBatches(t, crossings)
	for _, c := range []struct {
		name   string
		linger time.Duration
	}{
		{"default: none", 0},
		{"negative: none", -1},
		{"1 ms", time.Millisecond},
		{"the whole tick", 2 * time.Millisecond},
	} {
		t.Run(c.name, func(t *testing.T) {
			nc := embeddedConn(t, "linger")
			subjects := transport.Subjects{Prefix: "linger"}
			w := watchBuilt(t, nc, subjects)
			a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Linger: c.linger, Subjects: subjects}, nc, prometheus.NewRegistry())
			if err != nil {
				t.Fatal(err)
			}
			runToEnd(t, a, nc, subjects, stream)
			sizes := w.waitEvents(t, crossings)
			n := 0
			for _, k := range sizes {
				n += k
			}
			s := a.Stats()
			if n != crossings || a.Emitted() != crossings || s.EventsComplete != crossings || s.InEvents != crossings*16 {
				t.Fatalf("%d events in batches %v, emitted %d, accounting %+v; want %d complete events", n, sizes, a.Emitted(), s, crossings)
			}
		})
	}
}

// runToEnd runs a, publishes the stream's batches to it and waits until
// Run returns at the end-of-run markers.
func runToEnd(t *testing.T, a *Assembler, nc *nats.Conn, subjects transport.Subjects, stream *sourced) {
	t.Helper()
	done := make(chan error, 1)
	go func() { done <- a.Run(context.Background()) }()
	<-a.Ready()
	for i, data := range stream.batches {
		if err := nc.Publish(subjects.Fragments(0, stream.sources[i]), data); err != nil {
			t.Fatal(err)
		}
	}
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(30 * time.Second):
		t.Fatal("Run did not end at the end-of-run markers")
	}
}
