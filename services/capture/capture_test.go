package capture

import (
	"context"
	"errors"
	"io"
	"net"
	"path/filepath"
	"slices"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// jsServer starts an embedded server with JetStream storing in dir.
func jsServer(t *testing.T, dir string) *server.Server {
	t.Helper()
	srv, err := transport.EmbeddedWith(transport.EmbeddedOptions{Port: -1, StoreDir: dir, MaxStore: 256 << 20})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	return srv
}

func connect(t *testing.T, srv *server.Server) (*nats.Conn, jetstream.JetStream) {
	t.Helper()
	nc, err := transport.Connect(srv.ClientURL(), t.Name())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	return nc, js
}

// emulate runs the readout emulator for crossings crossings into sink,
// with batch boundaries that depend on the crossing count only (no
// flush by age), so two runs with one seed send the same batches.
func emulate(t *testing.T, sink emulator.Sink, crossings uint64, partitions int) []uint32 {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 8)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, 3, detector.SimpleConfig{DijetFraction: 0.2})
	if err != nil {
		t.Fatal(err)
	}
	ids := part.SourceIDs()
	emu, err := emulator.New(emulator.Config{Run: 4, Seed: 3, Crossings: crossings, BatchCrossings: 16, Partitions: partitions,
		MaxBatchAge: time.Hour}, gen, ids, sink, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	return ids
}

// memWriter keeps what Save writes.
type memWriter struct {
	batches   []recording.Batch
	crossings uint64
}

func (m *memWriter) WriteBatch(source uint32, partition int, firstTs int64, data []byte, fragments int) error {
	m.batches = append(m.batches, recording.Batch{SourceID: source, Partition: partition, FirstTimestampNs: firstTs,
		Fragments: fragments, Data: slices.Clone(data)})
	return nil
}

func (m *memWriter) AddCrossings(n uint64) { m.crossings += n }

func save(t *testing.T, js jetstream.JetStream, o SaveOptions) (Result, *memWriter) {
	t.Helper()
	w := &memWriter{}
	o.Create = func(run uint32) (Writer, error) { return w, nil }
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	res, err := Save(ctx, js, o)
	if err != nil {
		t.Fatal(err)
	}
	return res, w
}

// withoutSendTime decodes a batch and clears its publish time, the one
// field a live publish and a file recording set differently.
func withoutSendTime(t *testing.T, data []byte) *pb.FragmentBatch {
	t.Helper()
	var b pb.FragmentBatch
	if err := proto.Unmarshal(data, &b); err != nil {
		t.Fatal(err)
	}
	b.SentUnixNs = 0
	return &b
}

// A run published live and stored by the stream comes out batch for
// batch as the same emulator writes it straight into a file: same order,
// sources, builder shares, first timestamps and fragments (compared with
// proto.Equal, protobuf's own comparison, after clearing the publish
// time), the end-of-run batches included; and the server's stored count
// agrees.
func TestSaveGivesWhatTheReadoutPublished(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "cap.test"}
	ctx := context.Background()
	st, created, err := Open(ctx, js, Options{Subjects: s, MaxBytes: 64 << 20})
	if err != nil || !created {
		t.Fatalf("open: created %v, %v", created, err)
	}
	if got := st.CachedInfo().Config.Name; got != "cap_test_fragments" {
		t.Errorf("stream name %q, want cap_test_fragments", got)
	}
	const crossings = 1000
	ids := emulate(t, emulator.NewNATSSink(nc, s), crossings, 2)

	direct := filepath.Join(t.TempDir(), "direct.bss")
	fw, err := recording.Create(direct, &pb.StreamHeader{Run: 4, SourceIds: ids, Partitions: 2})
	if err != nil {
		t.Fatal(err)
	}
	emulate(t, emulator.FileSink{W: fw}, crossings, 2)
	if err := fw.Close(); err != nil {
		t.Fatal(err)
	}
	r, err := recording.Open(direct)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	var want []recording.Batch
	for {
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		b.Data = slices.Clone(b.Data)
		want = append(want, b)
	}

	res, w := save(t, js, SaveOptions{Subjects: s, Sources: ids, Partitions: 2, Idle: 2 * time.Second})
	if !res.Complete() || res.Idle {
		t.Fatalf("save incomplete: %v (%+v)", res.Problems(), res)
	}
	if res.Run != 4 || res.Crossings != crossings || w.crossings != crossings || res.Expected != 2*len(ids) || res.Ended != res.Expected {
		t.Errorf("run %d, %d crossings (writer %d), %d of %d ended; want run 4, %d crossings, all %d ended",
			res.Run, res.Crossings, w.crossings, res.Ended, res.Expected, crossings, 2*len(ids))
	}
	if len(w.batches) != len(want) || res.Batches != uint64(len(want)) {
		t.Fatalf("saved %d batches (result %d), the direct recording has %d", len(w.batches), res.Batches, len(want))
	}
	var fragments uint64
	for i, g := range w.batches {
		x := want[i]
		fragments += uint64(x.Fragments)
		if g.SourceID != x.SourceID || g.Partition != x.Partition || g.FirstTimestampNs != x.FirstTimestampNs || g.Fragments != x.Fragments {
			t.Fatalf("batch %d: source %d share %d first %d, %d fragments; direct: source %d share %d first %d, %d fragments",
				i, g.SourceID, g.Partition, g.FirstTimestampNs, g.Fragments, x.SourceID, x.Partition, x.FirstTimestampNs, x.Fragments)
		}
		if !proto.Equal(withoutSendTime(t, g.Data), withoutSendTime(t, x.Data)) {
			t.Fatalf("batch %d (source %d share %d): contents differ from the direct recording", i, g.SourceID, g.Partition)
		}
	}
	if res.Fragments != fragments {
		t.Errorf("result counts %d fragments, the batches hold %d", res.Fragments, fragments)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if info.State.Msgs != uint64(len(want)) {
		t.Errorf("the server stored %d messages, the readout published %d batches", info.State.Msgs, len(want))
	}
	// Opening again finds the same stream.
	if _, created, err := Open(ctx, js, Options{Subjects: s, MaxBytes: 64 << 20}); err != nil || created {
		t.Errorf("second open: created %v, %v; want the existing stream", created, err)
	}
	// A stream of that name storing something else is refused, not reused.
	if _, _, err := Open(ctx, js, Options{Name: "cap_test_fragments", Subjects: transport.Subjects{Prefix: "other"}, MaxBytes: 64 << 20}); err == nil || !strings.Contains(err.Error(), "exists and stores") {
		t.Errorf("open with other subjects: %v", err)
	}
}

// countingSink counts the batches a sink sends.
type countingSink struct {
	emulator.Sink
	n uint64
}

func (c *countingSink) Send(partition int, source uint32, firstTs int64, data []byte, fragments int) error {
	c.n++
	return c.Sink.Send(partition, source, firstTs, data, fragments)
}

// awaitStored waits until the stream holds n messages: the server stores
// a batch after it has received it, so a flushed publish may not be in
// the store yet.
func awaitStored(t *testing.T, st jetstream.Stream, n uint64) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for {
		info, err := st.Info(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if info.State.Msgs >= n {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("the stream holds %d of %d batches after 10 s", info.State.Msgs, n)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// What the stream stored survives a server restart: a new server on the
// same store directory (the recorder was never running during the run)
// gives the whole run.
func TestSaveAfterServerRestart(t *testing.T) {
	dir := t.TempDir()
	srv := jsServer(t, dir)
	nc, js := connect(t, srv)
	s := transport.Subjects{}
	st, _, err := Open(context.Background(), js, Options{Subjects: s, MaxBytes: 64 << 20})
	if err != nil {
		t.Fatal(err)
	}
	sink := &countingSink{Sink: emulator.NewNATSSink(nc, s)}
	ids := emulate(t, sink, 500, 1)
	awaitStored(t, st, sink.n)
	nc.Close()
	srv.Shutdown()
	srv.WaitForShutdown()

	srv2 := jsServer(t, dir)
	_, js2 := connect(t, srv2)
	res, w := save(t, js2, SaveOptions{Subjects: s, Sources: ids, Partitions: 1, Idle: 2 * time.Second})
	if !res.Complete() || res.Crossings != 500 || len(w.batches) == 0 {
		t.Fatalf("after the restart: complete %v (%v), %d crossings, %d batches; want the whole run of 500 crossings",
			res.Complete(), res.Problems(), res.Crossings, len(w.batches))
	}
}

// publishBatch publishes a hand-made batch of n fragments, stamped with
// a publish time later than any before it (as a readout's are) unless it
// has one, and returns what it published.
func publishBatch(t *testing.T, nc *nats.Conn, s transport.Subjects, part int, b *pb.FragmentBatch, n int) []byte {
	t.Helper()
	if b.SentUnixNs == 0 {
		b.SentUnixNs = sentClock.Add(1)
	}
	for k := 0; k < n; k++ {
		b.Fragments = append(b.Fragments, &pb.Fragment{SourceId: b.SourceId, Run: b.Run, Orbit: b.Sequence + 1, Bcid: uint32(k + 1), TimestampNs: int64(k)})
	}
	data, err := proto.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	if err := nc.Publish(s.Fragments(part, b.SourceId), data); err != nil {
		t.Fatal(err)
	}
	return data
}

// sentClock stamps hand-made batches with increasing publish times.
var sentClock atomic.Int64

// Every way a stored run can fall short is named: a missing batch (a gap
// in a pair's sequence numbers), a pair that never ended, a batch stored
// twice, a source the readout does not have, a message that is not a
// batch; batches of another run are skipped and counted. Save gives up
// after the idle time, as the last pair never ends.
func TestSaveNamesWhatIsMissing(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "gaps"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	pub := func(src uint32, run uint32, seq uint64, end bool) {
		publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: src, Run: run, Sequence: seq, EndOfRun: end}, 2)
	}
	pub(1, 7, 0, false)
	pub(1, 7, 1, false)
	pub(1, 7, 3, false) // 2 is missing
	pub(1, 7, 4, true)
	twice := publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 2, Run: 7}, 2)
	if err := nc.Publish(s.Fragments(0, 2), twice); err != nil { // stored twice
		t.Fatal(err)
	}
	pub(2, 7, 1, true)
	pub(3, 7, 0, false) // never ends
	pub(9, 7, 0, true)  // not one of the readout's sources
	pub(1, 8, 0, true)  // another run
	if err := nc.Publish(s.Fragments(0, 1), []byte{0xff, 0xff, 0xff}); err != nil {
		t.Fatal(err)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	res, w := save(t, js, SaveOptions{Subjects: s, Sources: []uint32{1, 2, 3}, Partitions: 1, Idle: 500 * time.Millisecond})
	if time.Since(start) < 500*time.Millisecond || !res.Idle {
		t.Errorf("save ended after %v, idle %v; want it to wait the idle time for source 3", time.Since(start), res.Idle)
	}
	if res.Complete() {
		t.Fatal("an incomplete run is reported complete")
	}
	if res.Run != 7 || res.Ended != 2 || res.Expected != 3 || !slices.Equal(res.NotEnded, []string{"source 3 share 0"}) {
		t.Errorf("run %d, %d of %d ended, not ended %v", res.Run, res.Ended, res.Expected, res.NotEnded)
	}
	if !slices.Equal(res.Gaps, []Gap{{Partition: 0, Source: 1, From: 2, To: 2}}) {
		t.Errorf("gaps %v, want source 1 batch 2", res.Gaps)
	}
	if res.Duplicates != 1 || res.Unexpected != 1 || res.Undecodable != 1 || res.OtherRuns[8] != 1 {
		t.Errorf("duplicates %d, unexpected %d, undecodable %d, other runs %v; want 1 each (run 8)", res.Duplicates, res.Unexpected, res.Undecodable, res.OtherRuns)
	}
	// Everything of run 7 that is a batch was written, duplicates and the
	// unknown source too (the builder counts them); 9 batches of 2.
	if len(w.batches) != 9 || res.Batches != 9 || res.Fragments != 18 {
		t.Errorf("wrote %d batches (result %d, %d fragments), want 9 and 18", len(w.batches), res.Batches, res.Fragments)
	}
	// Crossings are counted once whatever the sources: the batches above
	// have orbits 1, 2, 4 and 5 (sequence + 1), with bcids 1 and 2.
	if res.Crossings != 8 {
		t.Errorf("%d crossings, want 8", res.Crossings)
	}
	p := strings.Join(res.Problems(), "; ")
	for _, want := range []string{"1 of 3 source/share pairs sent no end-of-run batch (source 3 share 0)", "1 batches missing (source 1 share 0 batch 2)",
		"1 stored messages were not fragment batches", "1 batches of sources or builder shares the configuration does not have"} {
		if !strings.Contains(p, want) {
			t.Errorf("problems %q lack %q", p, want)
		}
	}
	// The other run is there to be saved on its own; the message that is
	// no batch could have been one of its, so it counts against it too.
	res8, _ := save(t, js, SaveOptions{Subjects: s, Run: 8, Sources: []uint32{1}, Partitions: 1, Idle: 300 * time.Millisecond})
	if res8.Ended != 1 || len(res8.Gaps) != 0 || res8.Undecodable != 1 || res8.Batches != 1 || res8.OtherRuns[7] != 9 {
		t.Errorf("run 8: %v, %d batches, %d of run 7 skipped", res8.Problems(), res8.Batches, res8.OtherRuns[7])
	}
}

// A stream that fills up refuses what comes after (discard new), so an
// overflowing recording keeps its start and is saved as incomplete,
// naming the batches and ends it refused, rather than quietly losing its
// beginning.
func TestFullStreamKeepsItsStart(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "full"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s, MaxBytes: 64 << 10}); err != nil {
		t.Fatal(err)
	}
	ids := emulate(t, emulator.NewNATSSink(nc, s), 2000, 1)
	res, w := save(t, js, SaveOptions{Subjects: s, Sources: ids, Partitions: 1, Idle: 500 * time.Millisecond})
	// The small end-of-run batches may still fit where full ones did not,
	// so what shows is missing batches or missing ends.
	if res.Complete() || len(res.Gaps)+len(res.NotEnded) == 0 {
		t.Fatalf("an overflowed stream saved as complete: %+v", res)
	}
	if len(w.batches) == 0 {
		t.Fatal("nothing saved")
	}
	if p := strings.Join(res.Problems(), "; "); !res.Full || !strings.Contains(p, "the stream is full") {
		t.Errorf("full %v, problems %q: the full stream is not named", res.Full, p)
	}
	var first pb.FragmentBatch
	if err := proto.Unmarshal(w.batches[0].Data, &first); err != nil || first.Sequence != 0 {
		t.Errorf("the first saved batch has sequence %d (%v), want 0: the start was kept", first.Sequence, err)
	}
	if res.Crossings >= 2000 {
		t.Errorf("%d crossings saved from a 64 KiB stream", res.Crossings)
	}
}

// Without JetStream on the server, opening says so; a size limit the
// server's store cannot hold is named with what to change, and without a
// limit given the stream fits itself to the store.
func TestOpenWithoutJetStream(t *testing.T) {
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	_, js := connect(t, srv)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if _, _, err := Open(ctx, js, Options{}); err == nil || !strings.Contains(err.Error(), "JetStream off") {
		t.Errorf("open without JetStream: %v", err)
	}
	_, js2 := connect(t, jsServer(t, t.TempDir()))
	if _, _, err := Open(ctx, js2, Options{MaxBytes: 1 << 40}); err == nil || !strings.Contains(err.Error(), "--max-mib") {
		t.Errorf("open with 1 TiB on a 256 MiB store: %v", err)
	}
	// Without a limit of its own the stream takes what the store holds.
	st, _, err := Open(ctx, js2, Options{})
	if err != nil || st.CachedInfo().Config.MaxBytes != 256<<20 {
		t.Errorf("open without a limit on a 256 MiB store: %v", err)
	}
}

// A second run stored under the same number is not merged into the
// first, whether the first ended (its batches come after their pairs'
// ends) or crashed (they go back in sequence, sent later): they are left
// out and make the save incomplete, naming the cause. A batch stored
// twice (the same bytes) is a duplicate, an end-of-run batch too.
func TestSaveKeepsRunsOfOneNumberApart(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "again"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	for range 2 {
		for seq := uint64(0); seq < 3; seq++ {
			publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 1, Run: 5, Sequence: seq, EndOfRun: seq == 2}, 2)
		}
	}
	res, w := save(t, js, SaveOptions{Subjects: s, Sources: []uint32{1}, Partitions: 1, Idle: 300 * time.Millisecond})
	if res.Complete() || res.AfterEnd != 3 || len(w.batches) != 3 || res.Duplicates != 0 {
		t.Errorf("complete %v, %d after the end, %d written, %d duplicates; want incomplete, 3, 3, 0", res.Complete(), res.AfterEnd, len(w.batches), res.Duplicates)
	}
	if p := strings.Join(res.Problems(), "; "); !strings.Contains(p, "a second run numbered 5") {
		t.Errorf("problems %q do not name the second run", p)
	}

	// A readout that crashed (no end) and started the run again: its
	// batches go back in sequence but were sent later.
	s2 := transport.Subjects{Prefix: "crash"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s2, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	for seq := uint64(0); seq < 3; seq++ {
		publishBatch(t, nc, s2, 0, &pb.FragmentBatch{SourceId: 1, Run: 5, Sequence: seq}, 2)
	}
	for seq := uint64(0); seq < 5; seq++ {
		publishBatch(t, nc, s2, 0, &pb.FragmentBatch{SourceId: 1, Run: 5, Sequence: seq, EndOfRun: seq == 4}, 2)
	}
	res, w = save(t, js, SaveOptions{Subjects: s2, Sources: []uint32{1}, Partitions: 1, Idle: 300 * time.Millisecond})
	if res.Complete() || res.AfterEnd != 5 || len(w.batches) != 3 || res.Duplicates != 0 {
		t.Errorf("after a crash: complete %v, %d after the end, %d written, %d duplicates; want incomplete, 5, 3, 0", res.Complete(), res.AfterEnd, len(w.batches), res.Duplicates)
	}

	// An end-of-run batch stored twice is a duplicate, not a second run.
	s3 := transport.Subjects{Prefix: "endtwice"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s3, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	publishBatch(t, nc, s3, 0, &pb.FragmentBatch{SourceId: 1, Run: 5}, 2)
	end := publishBatch(t, nc, s3, 0, &pb.FragmentBatch{SourceId: 1, Run: 5, Sequence: 1, EndOfRun: true}, 2)
	if err := nc.Publish(s3.Fragments(0, 1), end); err != nil {
		t.Fatal(err)
	}
	res, w = save(t, js, SaveOptions{Subjects: s3, Sources: []uint32{1}, Partitions: 1, Idle: 300 * time.Millisecond})
	if !res.Complete() || res.Duplicates != 1 || res.AfterEnd != 0 || len(w.batches) != 3 {
		t.Errorf("end stored twice: complete %v (%v), %d duplicates, %d after the end, %d written", res.Complete(), res.Problems(), res.Duplicates, res.AfterEnd, len(w.batches))
	}
}

// A save that is waiting for more ends promptly, with a clear error, when
// its stream is removed, and with the context's error when cancelled;
// a stream of the name that stores another prefix is refused at once.
func TestSaveEndsWhenTheStreamGoes(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "gone"}
	ctx := context.Background()
	if _, _, err := Open(ctx, js, Options{Subjects: s, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 1, Run: 1}, 2)
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	// run starts a save and returns once it has read the stored batch
	// and waits for more.
	run := func(ctx context.Context) chan error {
		done, created := make(chan error, 1), make(chan struct{})
		go func() {
			_, err := Save(ctx, js, SaveOptions{Subjects: s, Sources: []uint32{1}, Partitions: 1, Idle: time.Minute,
				Create: func(uint32) (Writer, error) { close(created); return &memWriter{}, nil }})
			done <- err
		}()
		select {
		case <-created:
		case err := <-done:
			t.Fatalf("save ended before reading: %v", err)
		case <-time.After(20 * time.Second):
			t.Fatal("the save read nothing within 20 s")
		}
		return done
	}
	wait := func(done chan error, what string) error {
		select {
		case err := <-done:
			return err
		case <-time.After(20 * time.Second):
			t.Fatalf("save did not end within 20 s of %s", what)
			return nil
		}
	}

	cctx, cancel := context.WithCancel(ctx)
	done := run(cctx)
	cancel()
	if err := wait(done, "its cancellation"); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled save: %v", err)
	}

	done = run(ctx)
	if err := Remove(ctx, js, DefaultName(s)); err != nil {
		t.Fatal(err)
	}
	if err := wait(done, "the stream's removal"); err == nil || !strings.Contains(err.Error(), "was removed while it was being saved") {
		t.Errorf("save of a removed stream: %v", err)
	}

	if _, _, err := Open(ctx, js, Options{Name: "elsewhere", Subjects: transport.Subjects{Prefix: "other"}, MaxBytes: 1 << 20}); err != nil {
		t.Fatal(err)
	}
	_, err := Save(ctx, js, SaveOptions{Name: "elsewhere", Subjects: s, Sources: []uint32{1}, Partitions: 1,
		Create: func(uint32) (Writer, error) { return &memWriter{}, nil }})
	if err == nil || !strings.Contains(err.Error(), "not the batches of this subject prefix") {
		t.Errorf("save of a stream of another prefix: %v", err)
	}
}

// A server restart during a save (a new server on the same port and
// store) does not end it: the save reconnects, reads on from where it
// was, and gets the rest of the run published after the restart.
func TestSaveCarriesOnThroughAServerRestart(t *testing.T) {
	dir := t.TempDir()
	srv := jsServer(t, dir)
	port := srv.Addr().(*net.TCPAddr).Port
	nc, js := connect(t, srv)
	s := transport.Subjects{Prefix: "restart"}
	if _, _, err := Open(context.Background(), js, Options{Subjects: s, MaxBytes: 64 << 20}); err != nil {
		t.Fatal(err)
	}
	publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 1, Run: 3, Sequence: 0}, 2)
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	type out struct {
		res Result
		err error
	}
	done, created := make(chan out, 1), make(chan struct{})
	w := &memWriter{}
	go func() {
		res, err := Save(context.Background(), js, SaveOptions{Subjects: s, Sources: []uint32{1}, Partitions: 1, Idle: 20 * time.Second,
			Create: func(uint32) (Writer, error) { close(created); return w, nil }})
		done <- out{res, err}
	}()
	select { // the save has read the first batch and waits for more
	case <-created:
	case o := <-done:
		t.Fatalf("the save ended before reading: %v", o.err)
	case <-time.After(20 * time.Second):
		t.Fatal("the save read nothing within 20 s")
	}
	srv.Shutdown()
	srv.WaitForShutdown()
	srv2, err := transport.EmbeddedWith(transport.EmbeddedOptions{Port: port, StoreDir: dir, MaxStore: 256 << 20})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv2.Shutdown(); srv2.WaitForShutdown() })
	nc2, err := transport.Connect(srv2.ClientURL(), "after-restart")
	if err != nil {
		t.Fatal(err)
	}
	defer nc2.Close()
	publishBatch(t, nc2, s, 0, &pb.FragmentBatch{SourceId: 1, Run: 3, Sequence: 1, EndOfRun: true}, 2)
	select {
	case o := <-done:
		if o.err != nil || !o.res.Complete() || o.res.Batches != 2 || len(w.batches) != 2 {
			t.Errorf("save through a restart: %v, complete %v (%v), %d batches", o.err, o.res.Complete(), o.res.Problems(), o.res.Batches)
		}
	case <-time.After(30 * time.Second):
		t.Fatal("the save did not finish after the server came back")
	}
}
