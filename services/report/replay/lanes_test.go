package replay

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// unpackedLists encodes a calorimeter fragment with its lists unpacked,
// one field per value: the same content, and so the same checksum, in a
// layout only the general decoding path takes.
func unpackedLists(f *pb.Fragment) []byte {
	return caloFragment(f, cat(unpacked(1, f.GetCalo().GetTowers()), unpacked(2, f.GetCalo().GetEtCounts())))
}

// badPayload encodes f with a tower list ending inside a varint: the
// fragment's framing is intact, its payload is not.
func badPayload(f *pb.Fragment) []byte {
	return caloFragment(f, []byte{1<<3 | byte(protowire.BytesType), 2, 0x80, 0x80})
}

// withUnknownField encodes f as proto.Marshal does and adds a field no
// version of the schema has.
func withUnknownField(f *pb.Fragment) []byte {
	b, err := proto.Marshal(f)
	if err != nil {
		panic(err)
	}
	b = protowire.AppendTag(b, 15, protowire.VarintType)
	return protowire.AppendVarint(b, 7)
}

// rewriteStream copies the stream at path, re-encoding fragment 3 of the
// batches listed in edits with the given encoder, and returns the copy.
func rewriteStream(t *testing.T, path string, edits map[int]func(*pb.Fragment) []byte) string {
	t.Helper()
	return rewriteFragments(t, path, func(batch, k int, f *pb.Fragment) []byte {
		if edit := edits[batch]; edit != nil && k == 3 {
			return edit(f)
		}
		return nil
	})
}

// rewriteFragments copies the stream at path with every fragment that
// edit gives an encoding for (by batch and position in it) re-encoded so,
// and returns the copy.
func rewriteFragments(t *testing.T, path string, edit func(batch, k int, f *pb.Fragment) []byte) string {
	t.Helper()
	r, err := recording.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	out := filepath.Join(t.TempDir(), "rewritten.bss")
	w, err := recording.Create(out, r.Header())
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; ; i++ {
		rb, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		data := rb.Data
		{
			var batch pb.FragmentBatch
			if err := proto.Unmarshal(data, &batch); err != nil {
				t.Fatal(err)
			}
			frags := batch.Fragments
			batch.Fragments = nil
			data, err = proto.Marshal(&batch)
			if err != nil {
				t.Fatal(err)
			}
			for k, f := range frags {
				enc, err := proto.Marshal(f)
				if err != nil {
					t.Fatal(err)
				}
				if e := edit(i, k, f); e != nil {
					enc = e
				}
				data = protowire.AppendTag(data, 5, protowire.BytesType)
				data = protowire.AppendBytes(data, enc)
			}
		}
		if err := w.WriteBatch(rb.SourceID, rb.Partition, rb.FirstTimestampNs, data, rb.Fragments); err != nil {
			t.Fatal(err)
		}
	}
	w.AddCrossings(r.Trailer().GetCrossings())
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return out
}

// Any number of lanes, in chunks of any size, replays a stream with every
// kind of awkward input exactly as the plain sequential chain does: lost, doubled, corrupted,
// late and reordered fragments, a fragment in a layout only the general
// decoder takes, one with a field unknown to the schema, and a batch that
// does not decode at all. Every lane decodes only its own crossings'
// fragments in full, so the lanes must pass each other the checksum
// verdicts and the failed batch for their builders to agree; the
// accounting must equal the sequential builder's as well as the events.
// And whoever decides an event, its lane or the calling goroutine, it is
// decided alike: lanes that leave every event, none, or as many as the
// calling goroutine keeps up with.
func TestLanesMatchSequentialOnAwkwardStream(t *testing.T) {
	gen, part := simpleGenerator(t, 11)
	path := recordStream(t, gen, part, 3000, false,
		emulator.Fault{Sources: []uint32{1, 4}, Drop: 0.02, Duplicate: 0.02, Corrupt: 0.02},
		emulator.Fault{Sources: []uint32{9}, Delay: 0.02, DelayCrossings: 8, Reorder: 0.05})
	path = rewriteStream(t, path, map[int]func(*pb.Fragment) []byte{40: unpackedLists, 90: badPayload, 130: withUnknownField, 170: unpackedLists})
	m := starterMenu(t)
	want, wantStats, wantBad := sequentialRun(t, path, m)
	if wantBad != 1 || wantStats.MalformedChecksum == 0 || wantStats.Duplicate == 0 || wantStats.EventsIncomplete == 0 {
		t.Fatalf("the sample does not exercise the faults: %d undecodable batches, accounting %+v", wantBad, wantStats)
	}
	met, _ := ParseQuantity("met")
	var one []decided
	for _, c := range []struct {
		lanes, chunk int
		mode         handOverMode
	}{{1, 32, handOverAdaptive}, {1, 5, handOverAll}, {1, 32, handOverNone}, {2, 7, handOverAdaptive}, {2, 32, handOverAll}, {3, 1, handOverAdaptive}, {5, 32, handOverNone}} {
		lanes := c.lanes
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: lanes, ChunkEvents: c.chunk, Values: []Quantity{met}, handOver: c.mode})
		src.Close()
		if sum.Builder != wantStats || sum.Undecodable != uint64(wantBad) {
			t.Errorf("%d lanes: accounting %+v, %d undecodable; sequential %+v, %d", lanes, sum.Builder, sum.Undecodable, wantStats, wantBad)
		}
		if len(got) != len(want) {
			t.Fatalf("%d lanes: %d events, sequential %d", lanes, len(got), len(want))
		}
		sameDecisions(t, fmt.Sprintf("%d lanes", lanes), got, want)
		// The values (computed by each event's lane) as one lane has them.
		if one == nil {
			one = got
		}
		sameEvents(t, fmt.Sprintf("%d lanes", lanes), got, one)
	}
}

// Crossings spread evenly over the lanes whatever the filling scheme's
// period: within 3% of an even share for 2 to 5 lanes, over consecutive
// crossing keys and over every second and every fourth one.
func TestLaneOfSpreadsEvenly(t *testing.T) {
	for _, step := range []uint64{1, 2, 4} {
		for lanes := 2; lanes <= 5; lanes++ {
			counts := make([]int, lanes)
			n := 0
			for key := uint64(0); key < 200000*step; key += step {
				counts[laneOf(key, lanes)]++
				n++
			}
			for k, c := range counts {
				if share := float64(c) * float64(lanes) / float64(n); share < 0.97 || share > 1.03 {
					t.Errorf("every %d slots, %d lanes: lane %d has %.3f of an even share", step, lanes, k, share)
				}
			}
		}
	}
}

// By timestamp the builder keys a fragment by the slot its time falls in,
// not by its counters, so an event can hold fragments whose counters name
// another lane's crossing: then every lane decodes every fragment in
// full, and the outputs still do not depend on the number of lanes. The
// sample's sources send timestamps only (counters zero).
func TestLanesByTimestamp(t *testing.T) {
	gen, part := simpleGenerator(t, 3)
	var cs pb.Checksummer
	path := rewriteFragments(t, recordStream(t, gen, part, 1000, false), func(_, _ int, f *pb.Fragment) []byte {
		f.Orbit, f.Bcid = 0, 0
		f.Checksum = cs.Sum(f)
		b, err := proto.Marshal(f)
		if err != nil {
			panic(err)
		}
		return b
	})
	m := starterMenu(t)
	jets, _ := ParseQuantity("jets[0].et")
	var want []decided
	var wantStats builder.Stats
	for _, lanes := range []int{1, 2, 3} {
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: lanes, Values: []Quantity{jets},
			Builder: builder.Config{Mode: builder.ByTimestamp}})
		src.Close()
		if lanes == 1 {
			want, wantStats = got, sum.Builder
			if sum.Builder.EventsComplete < 900 {
				t.Fatalf("by timestamp, %d of 1000 events complete: the sample does not build", sum.Builder.EventsComplete)
			}
			continue
		}
		if sum.Builder != wantStats || len(got) != len(want) {
			t.Fatalf("%d lanes by timestamp: %d events, accounting %+v; one lane %d, %+v", lanes, len(got), sum.Builder, len(want), wantStats)
		}
		sameEvents(t, fmt.Sprintf("%d lanes by timestamp", lanes), got, want)
	}
}

// sameEvents is sameDecisions for every field the sink saw, values
// compared bit for bit (a missing jet's value is NaN).
func sameEvents(t *testing.T, what string, got, want []decided) {
	t.Helper()
	sameDecisions(t, what, got, want)
	for i := range got {
		g, w := got[i], want[i]
		same := g.truthN == w.truthN && len(g.values) == len(w.values)
		for k := 0; same && k < len(g.values); k++ {
			same = math.Float64bits(g.values[k]) == math.Float64bits(w.values[k])
		}
		if !same {
			t.Fatalf("%s, event %d: values %v truth %d, want %v truth %d", what, i, g.values, g.truthN, w.values, w.truthN)
		}
	}
}

// A stream still being written replays as far as it was when opened, on
// every lane alike: the rest, appended after OpenStream, is seen by none,
// and the replay says where reading stopped.
func TestLanesReadTheFileAsOpened(t *testing.T) {
	gen, part := simpleGenerator(t, 8)
	full := recordStream(t, gen, part, 6000, false)
	data, err := os.ReadFile(full)
	if err != nil {
		t.Fatal(err)
	}
	m := starterMenu(t)
	var want []decided
	for _, lanes := range []int{1, 2, 3} {
		path := filepath.Join(t.TempDir(), "growing.bss")
		if err := os.WriteFile(path, data[:len(data)*3/4], 0o644); err != nil {
			t.Fatal(err)
		}
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		f, err := os.OpenFile(path, os.O_APPEND|os.O_WRONLY, 0)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := f.Write(data[len(data)*3/4:]); err != nil {
			t.Fatal(err)
		}
		f.Close()
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: lanes})
		src.Close()
		if sum.InputError == "" || len(got) == 0 || len(got) >= 6000 {
			t.Fatalf("%d lanes: %d events, input error %q; want part of the stream and where it stopped", lanes, len(got), sum.InputError)
		}
		if lanes == 1 {
			want = got
			continue
		}
		if len(got) != len(want) {
			t.Fatalf("%d lanes: %d events, one lane %d", lanes, len(got), len(want))
		}
		sameDecisions(t, fmt.Sprintf("%d lanes", lanes), got, want)
	}
}
