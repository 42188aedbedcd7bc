package assembler

import (
	"context"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"

	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// backlogThen runs before before reading the backlog: the test publishes
// there batches that reach the restarted builder live while it catches up,
// and are stored in the stream too.
type backlogThen struct {
	capture.Backlog
	before func()
}

func (b backlogThen) Since(ctx context.Context, subject string, since time.Time, take func(string, []byte) (bool, error)) error {
	b.before()
	return b.Backlog.Since(ctx, subject, since, take)
}

// A builder stopped in the middle of a run and a new one started on its
// state file, with the capture stream to catch up from, lose nothing of
// what was published while neither ran: every crossing is built exactly
// once, every fragment is received once between them. The catch-up passes
// over what the first builder took, and stops where the live batches
// begin, which it takes next.
func TestRestartCatchesUpFromTheCapture(t *testing.T) {
	// Published once the second builder listens, before its catch-up
	// reads (live and stored): two crossings and five sources of the
	// next, then the first source's batch of one crossing only, so that
	// the other sources still have batches to read in the stream when
	// that source has caught up.
	t.Run("every source live", func(t *testing.T) { restartCatchesUp(t, 32*16+5, false) })
	t.Run("one source live", func(t *testing.T) { restartCatchesUp(t, 30*16+1, false) })
	// Once the live batches have passed what the stream gave, a source
	// numbering its batches from 0 again (its readout started anew
	// within the run) is taken, not passed over as taken already.
	t.Run("a readout started again", func(t *testing.T) { restartCatchesUp(t, 32*16+5, true) })
}

// renumber gives the batches of source src from index from on sequence
// numbers from 0, as a readout started again would.
func renumber(t *testing.T, s *sourced, src uint32, from int) {
	t.Helper()
	var seq uint64
	for i := from; i < len(s.batches); i++ {
		if s.sources[i] != src {
			continue
		}
		var b pb.FragmentBatch
		if err := proto.Unmarshal(s.batches[i], &b); err != nil {
			t.Fatal(err)
		}
		b.Sequence = seq
		seq++
		data, err := proto.Marshal(&b)
		if err != nil {
			t.Fatal(err)
		}
		s.batches[i] = data
	}
	if seq == 0 {
		t.Fatalf("no batch of source %d from %d on", src, from)
	}
}

func restartCatchesUp(t *testing.T, twice int, restarted bool) {
	const crossings = 40
	srv, err := transport.EmbeddedWith(transport.EmbeddedOptions{Port: -1, StoreDir: t.TempDir(), MaxStore: 256 << 20})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	r := newRestartRig(t, srv, "catch", crossings)
	js, err := jetstream.New(r.conn("capture"))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	st, _, err := capture.Open(ctx, js, capture.Options{Subjects: r.subjects, MaxBytes: 64 << 20})
	if err != nil {
		t.Fatal(err)
	}
	stored := func(n int) func() bool {
		return func() bool {
			info, err := st.Info(ctx)
			return err == nil && info.State.Msgs == uint64(n)
		}
	}

	cut := 20*16 + 8 // the first builder stops with crossing 20 half sent
	gap := 30 * 16   // published while no builder runs
	backlog := capture.Backlog{JS: js, Name: capture.DefaultName(r.subjects)}

	first, stop, done := r.start(backlog)
	r.send(0, cut)
	waitFor(t, "the first builder's fragments", func() bool { return first.Stats().Received == uint64(cut) })
	stop()
	if err := ended(t, done); err != nil {
		t.Fatal(err)
	}
	firstStats := first.Stats()
	if taken, repeated := first.CatchUpStats(); taken != 0 || repeated != 0 {
		t.Errorf("the first builder caught up %d and passed over %d batches; it had nothing to catch up", taken, repeated)
	}
	r.send(cut, gap)
	waitFor(t, "the stream to store the batches sent while no builder ran", stored(gap))

	second, _, done2 := r.start(backlogThen{backlog, func() {
		r.send(gap, twice)
		waitFor(t, "the stream to store the batches sent before the catch-up", stored(twice))
	}})
	if !second.Resumed() {
		t.Fatal("the second builder did not resume")
	}
	waitFor(t, "the catch-up", func() bool { taken, _ := second.CatchUpStats(); return taken == uint64(gap-cut+1) })
	if restarted {
		renumber(t, r.stream, r.stream.sources[twice], twice)
	}
	r.send(twice, len(r.stream.batches))
	if err := ended(t, done2); err != nil {
		t.Fatal(err)
	}
	r.checkOnceEach(firstStats, second, crossings)
	// From the stream: what the first builder had (cut batches, passed
	// over), then what nobody had, and the first batch that also came
	// live, which shows the stream has reached the live ones; its live
	// copy is passed over, the other live ones taken.
	if taken, repeated := second.CatchUpStats(); taken != uint64(gap-cut+1) || repeated != uint64(cut+1) {
		t.Errorf("caught up %d and passed over %d batches, want %d and %d", taken, repeated, gap-cut+1, cut+1)
	}
}
