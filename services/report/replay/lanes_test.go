package replay

import (
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

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
		if edit := edits[i]; edit != nil {
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
				if k == 3 {
					enc = edit(f)
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

// Any number of lanes replays a stream with every kind of awkward input
// exactly as the plain sequential chain does: lost, doubled, corrupted,
// late and reordered fragments, a fragment in a layout only the general
// decoder takes, one with a field unknown to the schema, and a batch that
// does not decode at all. Every lane decodes only its own crossings'
// fragments in full, so the lanes must pass each other the checksum
// verdicts and the failed batch for their builders to agree; the
// accounting must equal the sequential builder's as well as the events.
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
	for _, lanes := range []int{1, 2, 3, 4} {
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: lanes, ChunkEvents: 7})
		src.Close()
		if sum.Builder != wantStats || sum.Undecodable != uint64(wantBad) {
			t.Errorf("%d lanes: accounting %+v, %d undecodable; sequential %+v, %d", lanes, sum.Builder, sum.Undecodable, wantStats, wantBad)
		}
		if len(got) != len(want) {
			t.Fatalf("%d lanes: %d events, sequential %d", lanes, len(got), len(want))
		}
		sameDecisions(t, fmt.Sprintf("%d lanes", lanes), got, want)
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
