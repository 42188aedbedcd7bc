package capture

import (
	"context"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Since reads the batches of one share stored from a time on, in stream
// order and nothing else: not the other share's, not those stored before
// that time; it stops when take has enough, or once the stream has
// stored nothing new for the quiet time.
func TestBacklogSince(t *testing.T) {
	srv := jsServer(t, t.TempDir())
	nc, js := connect(t, srv)
	ctx := context.Background()
	s := transport.Subjects{Prefix: "back"}
	st, _, err := Open(ctx, js, Options{Subjects: s, MaxBytes: 16 << 20})
	if err != nil {
		t.Fatal(err)
	}
	b := Backlog{JS: js, Name: DefaultName(s), Idle: 2 * time.Second, Quiet: 100 * time.Millisecond}
	type got struct {
		subject string
		seq     uint64
	}
	read := func(share int, since time.Time) []got {
		t.Helper()
		var out []got
		err := b.Since(ctx, s.FragmentsOf(share), since, func(subject string, data []byte) (bool, error) {
			var fb pb.FragmentBatch
			if err := proto.Unmarshal(data, &fb); err != nil {
				t.Fatal(err)
			}
			out = append(out, got{subject, fb.Sequence})
			return true, nil
		})
		if err != nil {
			t.Fatal(err)
		}
		return out
	}
	if g := read(0, time.Time{}); len(g) != 0 {
		t.Fatalf("an empty stream gave %v", g)
	}
	for seq := range uint64(3) {
		publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 4, Run: 1, Sequence: seq}, 1)
		publishBatch(t, nc, s, 1, &pb.FragmentBatch{SourceId: 4, Run: 1, Sequence: seq}, 1)
	}
	awaitStored(t, st, 6)
	// The server stamps what it stores; just after the last stored time
	// splits the two rounds.
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	split := info.State.LastTime.Add(time.Nanosecond)
	for seq := uint64(3); seq < 5; seq++ {
		publishBatch(t, nc, s, 0, &pb.FragmentBatch{SourceId: 4, Run: 1, Sequence: seq}, 1)
		publishBatch(t, nc, s, 1, &pb.FragmentBatch{SourceId: 5, Run: 1, Sequence: seq}, 1)
	}
	awaitStored(t, st, 10)

	all := read(0, time.Time{})
	if len(all) != 5 {
		t.Fatalf("share 0 from the start: %v, want 5 batches", all)
	}
	for i, g := range all {
		if g.seq != uint64(i) || g.subject != s.Fragments(0, 4) {
			t.Errorf("batch %d: %+v, want sequence %d on %s", i, g, i, s.Fragments(0, 4))
		}
	}
	if later := read(1, split); len(later) != 2 || later[0].seq != 3 || later[1].subject != s.Fragments(1, 5) {
		t.Errorf("share 1 since the split: %v, want sequences 3 and 4 of source 5", later)
	}
	if none := read(0, time.Now().Add(time.Hour)); len(none) != 0 {
		t.Errorf("since a time to come: %v", none)
	}

	// take's error ends the reading and comes back; so does its "enough".
	stop := b.Since(ctx, s.FragmentsOf(0), time.Time{}, func(string, []byte) (bool, error) { return true, context.Canceled })
	if stop != context.Canceled {
		t.Errorf("take's error: %v", stop)
	}
	n := 0
	if err := b.Since(ctx, s.FragmentsOf(0), time.Time{}, func(string, []byte) (bool, error) { n++; return n < 2, nil }); err != nil || n != 2 {
		t.Errorf("enough after 2 batches: %d taken, %v", n, err)
	}
	// No stream: a clear error.
	err = Backlog{JS: js, Name: "absent"}.Since(ctx, s.FragmentsOf(0), time.Time{}, func(string, []byte) (bool, error) { return true, nil })
	if err == nil || !strings.Contains(err.Error(), "absent") {
		t.Errorf("a missing stream: %v", err)
	}
}
