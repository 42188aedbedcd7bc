package loadtest

import (
	"context"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// A paced feed never publishes a batch before it is due, whatever its
// Tick, stamps every batch with a time at or after its due time, and
// offers every batch once, in order.
func TestFeedNeverEarly(t *testing.T) {
	ds, nw := testRig(t, GenerateConfig{Crossings: 400, BatchCrossings: 1, Seed: 3})
	const rate = 20_000.0
	for _, tick := range []time.Duration{-1, 0, time.Millisecond} {
		s := transport.Subjects{Prefix: "feedtest"}
		recv, err := nw.Connect("feed-test-recv")
		if err != nil {
			t.Fatal(err)
		}
		var mu sync.Mutex
		var stamps []int64
		sub, err := recv.Subscribe(s.FragmentsOf(0), func(m *nats.Msg) {
			var b pb.FragmentBatch
			if err := proto.Unmarshal(m.Data, &b); err != nil {
				t.Error(err)
				return
			}
			if !b.EndOfRun {
				mu.Lock()
				stamps = append(stamps, b.SentUnixNs)
				mu.Unlock()
			}
		})
		if err != nil {
			t.Fatal(err)
		}
		if err := recv.Flush(); err != nil {
			t.Fatal(err)
		}
		pub, err := nw.Connect("feed-test-pub")
		if err != nil {
			t.Fatal(err)
		}
		f := NewFeed(ds, pub, s)
		f.Tick = tick
		st, err := f.Run(context.Background(), 0, rate, nil)
		if err != nil {
			t.Fatal(err)
		}
		if st.Batches != uint64(len(ds.Batches)) || st.Crossings != ds.Crossings {
			t.Fatalf("tick %v: %d batches and %d crossings offered, want %d and %d", tick, st.Batches, st.Crossings, len(ds.Batches), ds.Crossings)
		}
		deadline := time.Now().Add(10 * time.Second)
		for {
			mu.Lock()
			n := len(stamps)
			mu.Unlock()
			if n >= len(ds.Batches) {
				break
			}
			if time.Now().After(deadline) {
				t.Fatalf("tick %v: %d of %d batches arrived", tick, n, len(ds.Batches))
			}
			time.Sleep(time.Millisecond)
		}
		_ = sub.Unsubscribe()
		start := st.First.UnixNano()
		mu.Lock()
		for i, ns := range stamps {
			// One connection to one subscription keeps the publish order.
			due := start + int64(float64(ds.Batches[i].Due)/rate*1e9)
			if ns < due {
				t.Fatalf("tick %v: batch %d (crossing %d) stamped %v before it was due", tick, i, ds.Batches[i].Due-1, time.Duration(due-ns))
			}
			if i > 0 && ns < stamps[i-1] {
				t.Fatalf("tick %v: batch %d stamped before batch %d", tick, i, i-1)
			}
		}
		mu.Unlock()
		recv.Close()
		pub.Close()
	}
}

// Dataset.Offered predicts what a feed offers for any crossing limit:
// whole laps, then the batches of every share that fit in what is left.
func TestOfferedIsWhatTheFeedOffers(t *testing.T) {
	ds, nw := testRig(t, GenerateConfig{Crossings: 1000, Partitions: 2, Seed: 4})
	pub, err := nw.Connect("feed-test-pub")
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range []uint64{0, 1, 31, 32, 33, 999, 1000, 1001, 1500, 2000, 2047} {
		st, err := NewFeed(ds, pub, transport.Subjects{Prefix: "offered"}).Run(context.Background(), n, 0, nil)
		if err != nil {
			t.Fatal(err)
		}
		if got := ds.Offered(n); got != st.Crossings {
			t.Errorf("limit %d: Offered says %d, the feed offered %d", n, got, st.Crossings)
		}
	}
}
