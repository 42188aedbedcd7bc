package assembler_test

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/assembler"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// buildAll runs one readout and n builder instances over one NATS server
// and returns a digest of every built event, keyed by crossing, plus the
// summed builder accounting.
func buildAll(t *testing.T, n int, crossings uint64, faults []emulator.Fault) (map[uint64]string, builder.Stats) {
	t.Helper()
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	conn := func(name string) *nats.Conn {
		nc, err := transport.Connect(srv.ClientURL(), name)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(nc.Close)
		return nc
	}
	subjects := transport.Subjects{Prefix: "scale"}
	d := detector.DefaultDescription()
	part, _ := detector.NewPartition(d.Geometry, 16)
	gen, _ := detector.NewSimpleGenerator(d, part, 3, detector.SimpleConfig{})

	var mu sync.Mutex
	events := map[uint64]string{}
	ends := 0
	watcher := conn("watch")
	sub, err := watcher.Subscribe(subjects.Built(), func(m *nats.Msg) {
		var b pb.EventBatch
		if err := proto.Unmarshal(m.Data, &b); err != nil {
			t.Error(err)
			return
		}
		mu.Lock()
		defer mu.Unlock()
		for _, ev := range b.Events {
			h := sha256.New()
			for _, f := range ev.Fragments {
				data, _ := proto.MarshalOptions{Deterministic: true}.Marshal(f)
				h.Write(data)
			}
			key := ev.Orbit*detector.SlotsPerOrbit + uint64(ev.Bcid)
			if _, dup := events[key]; dup {
				t.Errorf("crossing %d emitted twice", key)
			}
			events[key] = hex.EncodeToString(h.Sum(nil)) + fmt.Sprint(ev.MissingSources)
		}
		if b.EndOfRun {
			ends++
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	sub.SetPendingLimits(-1, -1)
	watcher.Flush()

	asms := make([]*assembler.Assembler, n)
	done := make(chan error, n)
	for k := range asms {
		a, err := assembler.New(assembler.Config{
			Builder: builder.Config{Run: 1, Sources: part.SourceIDs()}, Instance: k, Instances: n, Subjects: subjects,
		}, conn("builder"), prometheus.NewRegistry())
		if err != nil {
			t.Fatal(err)
		}
		asms[k] = a
		go func() { done <- a.Run(context.Background()) }()
		<-a.Ready()
	}
	emu, err := emulator.New(emulator.Config{Run: 1, Seed: 3, Crossings: crossings, Partitions: n, Faults: faults},
		gen, part.SourceIDs(), emulator.NewNATSSink(conn("readout"), subjects), prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	for range asms {
		select {
		case err := <-done:
			if err != nil {
				t.Fatal(err)
			}
		case <-time.After(30 * time.Second):
			t.Fatal("builders did not finish")
		}
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		mu.Lock()
		got := ends
		mu.Unlock()
		if got == n {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d end-of-run batches seen", got, n)
		}
		time.Sleep(5 * time.Millisecond)
	}
	var total builder.Stats
	for k, a := range asms {
		if a.Emitted() == 0 || (n > 1 && a.Emitted() == crossings) {
			t.Errorf("builder %d of %d emitted %d of %d events: the shares are not split", k, n, a.Emitted(), crossings)
		}
		s := a.Stats()
		total.Received += s.Received
		total.InEvents += s.InEvents
		total.Duplicate += s.Duplicate
		total.Malformed += s.Malformed
		total.EventsComplete += s.EventsComplete
		total.EventsIncomplete += s.EventsIncomplete
	}
	mu.Lock()
	defer mu.Unlock()
	return events, total
}

// One builder and three builders over one NATS server build exactly the
// same events, faults included: instance k of N owns a deterministic share
// of the crossings, and the union of the shares is the whole.
func TestScaleOutGivesTheSameEvents(t *testing.T) {
	faults := []emulator.Fault{{Drop: 0.02, Duplicate: 0.02, Corrupt: 0.005}}
	one, s1 := buildAll(t, 1, 6000, faults)
	three, s3 := buildAll(t, 3, 6000, faults)
	if len(one) != 6000 || len(three) != 6000 {
		t.Fatalf("events: %d with one builder, %d with three", len(one), len(three))
	}
	for key, digest := range one {
		if three[key] != digest {
			t.Fatalf("crossing %d differs between one and three builders", key)
		}
	}
	if s1 != s3 {
		t.Errorf("accounting differs: one %+v, three %+v", s1, s3)
	}
}
