package assembler

import (
	"context"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// A builder stopped in the middle of a run, with a crossing half sent, and
// a new one started on its state file build every crossing exactly once
// between them, and announce the end of the run once, with every event.
func TestRestartMidRunBuildsEachCrossingOnce(t *testing.T) {
	const crossings = 40
	stream, sources := oneCrossingBatches(t, crossings)
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	conn := func(name string) *nats.Conn {
		nc, err := transport.ConnectInProcess(srv, name)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(nc.Close)
		return nc
	}
	subjects := transport.Subjects{Prefix: "restart"}
	log := watchBuilt(t, conn("watch"), subjects)
	pub := conn("readout")
	state := filepath.Join(t.TempDir(), "builder.state")
	start := func() (*Assembler, context.CancelFunc, chan error) {
		a, err := New(Config{Builder: builder.Config{Run: 1, Sources: sources}, Subjects: subjects, StateFile: state}, conn("builder"), prometheus.NewRegistry())
		if err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- a.Run(ctx) }()
		<-a.Ready()
		return a, cancel, done
	}
	send := func(from, to int) {
		for i := from; i < to; i++ {
			if err := pub.Publish(subjects.Fragments(0, stream.sources[i]), stream.batches[i]); err != nil {
				t.Fatal(err)
			}
		}
		if err := pub.Flush(); err != nil {
			t.Fatal(err)
		}
	}
	waitFor := func(what string, cond func() bool) {
		t.Helper()
		deadline := time.Now().Add(10 * time.Second)
		for !cond() {
			if time.Now().After(deadline) {
				t.Fatalf("timed out waiting for %s", what)
			}
			time.Sleep(time.Millisecond)
		}
	}

	cut := 20*16 + 8 // crossing 20 half sent
	first, stop, done := start()
	if first.Resumed() {
		t.Fatal("the first builder resumed from a state file that should not exist")
	}
	send(0, cut)
	waitFor("the first builder's fragments", func() bool { return first.Stats().Received == uint64(cut) })
	stop()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(state); err != nil {
		t.Fatalf("no state file after the interruption: %v", err)
	}
	firstStats := first.Stats()

	second, _, done2 := start()
	if !second.Resumed() {
		t.Fatal("the second builder did not resume")
	}
	send(cut, len(stream.batches))
	if err := <-done2; err != nil {
		t.Fatal(err)
	}
	waitFor("the end of the run", func() bool { log.mu.Lock(); defer log.mu.Unlock(); return len(log.ends) > 0 })

	log.mu.Lock()
	defer log.mu.Unlock()
	if len(log.counts) != crossings {
		t.Errorf("%d crossings built, want %d", len(log.counts), crossings)
	}
	for k, n := range log.counts {
		if n != 1 {
			t.Errorf("crossing at slot %d built %d times", k, n)
		}
	}
	if len(log.ends) != 1 || log.ends[0] != crossings {
		t.Errorf("end-of-run batches announcing %v events, want one announcing %d", log.ends, crossings)
	}
	// Between them the two accounted for every fragment: the second half
	// of crossing 20 is late for the second builder.
	s := second.Stats()
	if got := firstStats.Received + s.Received; got != uint64(crossings*len(sources)) {
		t.Errorf("fragments received %d + %d, want %d", firstStats.Received, s.Received, crossings*len(sources))
	}
	if s.Late != 8 || !s.Balanced() || !firstStats.Balanced() {
		t.Errorf("second builder %+v: want the 8 fragments of crossing 20 it did not start late", s)
	}
	if _, err := os.Stat(state); !os.IsNotExist(err) {
		t.Errorf("state file left after the end of the run: %v", err)
	}
}

// A state file of another run or share is refused, not taken up.
func TestStateFileOfAnotherRunRefused(t *testing.T) {
	state := filepath.Join(t.TempDir(), "builder.state")
	if err := writeState(state, builderState{Run: 7, Instance: 0, Instances: 1, ClosedNs: 1000}); err != nil {
		t.Fatal(err)
	}
	nc := embeddedConn(t, "test")
	cfg := Config{Builder: builder.Config{Run: 8, Sources: []uint32{1}}, Subjects: transport.Subjects{Prefix: "test"}, StateFile: state}
	if _, err := New(cfg, nc, prometheus.NewRegistry()); err == nil {
		t.Fatal("a state file of run 7 was taken up by run 8")
	}
	cfg.Builder.Run = 7
	a, err := New(cfg, nc, prometheus.NewRegistry())
	if err != nil || !a.Resumed() || a.Stats().ClosedNs != 1000 {
		t.Fatalf("run 7: %v, resumed %v", err, a != nil && a.Resumed())
	}
}
