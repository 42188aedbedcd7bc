package assembler

import (
	"context"
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
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, 9, detector.SimpleConfig{})
	if err != nil {
		t.Fatal(err)
	}
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

// builtWatcher counts the events of every built-event batch.
type builtWatcher struct {
	mu     sync.Mutex
	sizes  []int
	events int
}

func watchBuilt(t *testing.T, nc *nats.Conn, s transport.Subjects) *builtWatcher {
	t.Helper()
	w := &builtWatcher{}
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
// out in full batches instead of one batch per completed crossing; a
// crossing that arrives alone goes out as soon as the queue is empty,
// without waiting for the tick.
func TestQueuedBatchesFillEventBatches(t *testing.T) {
	stream, sources := oneCrossingBatches(t, 200)
	nc := embeddedConn(t, "receive")
	subjects := transport.Subjects{Prefix: "receive"}
	w := watchBuilt(t, nc, subjects)
	a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Tick: time.Hour, Subjects: subjects}, nc, prometheus.NewRegistry())
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
