package assembler

import (
	"context"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// restartRig holds what the tests of a builder stopped and started again
// within a run share: one-crossing batches of 16 sources, a server, a
// watcher of the built events, a readout connection and a state file.
type restartRig struct {
	t        *testing.T
	srv      *server.Server
	subjects transport.Subjects
	stream   *sourced
	sources  []uint32
	log      *builtWatcher
	pub      *nats.Conn
	state    string
}

func newRestartRig(t *testing.T, srv *server.Server, prefix string, crossings uint64) *restartRig {
	t.Helper()
	r := &restartRig{t: t, srv: srv, subjects: transport.Subjects{Prefix: prefix}, state: filepath.Join(t.TempDir(), "builder.state")}
	r.stream, r.sources = oneCrossingBatches(t, crossings)
	r.log = watchBuilt(t, r.conn("watch"), r.subjects)
	r.pub = r.conn("readout")
	return r
}

func (r *restartRig) conn(name string) *nats.Conn {
	r.t.Helper()
	nc, err := transport.ConnectInProcess(r.srv, name)
	if err != nil {
		r.t.Fatal(err)
	}
	r.t.Cleanup(nc.Close)
	return nc
}

// send publishes batches from up to to of the stream.
func (r *restartRig) send(from, to int) {
	r.t.Helper()
	for i := from; i < to; i++ {
		if err := r.pub.Publish(r.subjects.Fragments(0, r.stream.sources[i]), r.stream.batches[i]); err != nil {
			r.t.Fatal(err)
		}
	}
	if err := r.pub.Flush(); err != nil {
		r.t.Fatal(err)
	}
}

// start runs a builder on the rig's state file, catching up from catchUp
// when it is not nil, and returns it once it listens.
func (r *restartRig) start(catchUp Backlog) (*Assembler, context.CancelFunc, chan error) {
	r.t.Helper()
	a, err := New(Config{Builder: builder.Config{Run: 1, Sources: r.sources}, Subjects: r.subjects, StateFile: r.state, CatchUp: catchUp},
		r.conn("builder"), prometheus.NewRegistry())
	if err != nil {
		r.t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- a.Run(ctx) }()
	<-a.Ready()
	return a, cancel, done
}

// ended waits up to 20 s for a builder's Run to return, and fails the test
// if it does not: a run that never ends is a defect to report, not to
// wait out.
func ended(t *testing.T, done <-chan error) error {
	t.Helper()
	select {
	case err := <-done:
		return err
	case <-time.After(20 * time.Second):
		t.Fatal("the builder did not end the run within 20 s")
		return nil
	}
}

// waitFor polls cond for up to 10 s.
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(time.Millisecond)
	}
}

// checkOnceEach checks, once the second builder has ended the run, that
// the two built every crossing exactly once, announced the end once with
// every event, received every fragment once between them (the rest of
// the half-sent crossing 20 late for the second), and removed the state.
func (r *restartRig) checkOnceEach(first builder.Stats, second *Assembler, crossings int) {
	t := r.t
	t.Helper()
	log := r.log
	waitFor(t, "the end of the run", func() bool { log.mu.Lock(); defer log.mu.Unlock(); return len(log.ends) > 0 })
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
	if len(log.ends) != 1 || log.ends[0] != uint64(crossings) {
		t.Errorf("end-of-run batches announcing %v events, want one announcing %d", log.ends, crossings)
	}
	s := second.Stats()
	if got := first.Received + s.Received; got != uint64(crossings*len(r.sources)) {
		t.Errorf("fragments received %d + %d, want %d: some lost or taken twice", first.Received, s.Received, crossings*len(r.sources))
	}
	if s.Late != 8 || !s.Balanced() || !first.Balanced() {
		t.Errorf("second builder %+v: want the 8 fragments of crossing 20 it did not start late", s)
	}
	if _, err := os.Stat(r.state); !os.IsNotExist(err) {
		t.Errorf("state file left after the end of the run: %v", err)
	}
}

// A builder stopped in the middle of a run, with a crossing half sent, and
// a new one started on its state file build every crossing exactly once
// between them, and announce the end of the run once, with every event.
func TestRestartMidRunBuildsEachCrossingOnce(t *testing.T) {
	const crossings = 40
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	r := newRestartRig(t, srv, "restart", crossings)

	cut := 20*16 + 8 // crossing 20 half sent
	first, stop, done := r.start(nil)
	if first.Resumed() {
		t.Fatal("the first builder resumed from a state file that should not exist")
	}
	r.send(0, cut)
	waitFor(t, "the first builder's fragments", func() bool { return first.Stats().Received == uint64(cut) })
	stop()
	if err := ended(t, done); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(r.state); err != nil {
		t.Fatalf("no state file after the interruption: %v", err)
	}
	firstStats := first.Stats()

	second, _, done2 := r.start(nil)
	if !second.Resumed() {
		t.Fatal("the second builder did not resume")
	}
	r.send(cut, len(r.stream.batches))
	if err := ended(t, done2); err != nil {
		t.Fatal(err)
	}
	r.checkOnceEach(firstStats, second, crossings)
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
