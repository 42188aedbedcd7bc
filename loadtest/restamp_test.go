package loadtest

import (
	"testing"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Lap k of a batch is the batch moved k laps later: decoded by proto it is
// the original with orbits, timestamps and the sequence shifted, its
// checksums valid (Checksummer, the readout's own), and its bytes are what
// proto.Marshal writes for that batch.
func TestRestampMovesTheBatch(t *testing.T) {
	ds, err := Generate(GenerateConfig{Crossings: 2000, Partitions: 2, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	checkRestamp(t, ds)
	// The physics generator's readout, muon sectors with hits included
	// (forced Z -> mu mu).
	phys, err := Generate(GenerateConfig{Crossings: 64, Seed: 3, Generator: detector.GeneratorConfig{
		Kind: detector.GeneratorPhysics, Physics: detector.PhysicsConfig{Force: "z-mumu", LibraryEvents: 20}}})
	if err != nil {
		t.Fatal(err)
	}
	hits := 0
	for i := range phys.Batches {
		var b pb.FragmentBatch
		if err := proto.Unmarshal(phys.Data(&phys.Batches[i]), &b); err != nil {
			t.Fatal(err)
		}
		for _, f := range b.Fragments {
			hits += len(f.GetMuon().GetHits())
		}
	}
	if hits == 0 {
		t.Fatal("no muon hits in the physics sample")
	}
	checkRestamp(t, phys)
}

// checkRestamp checks laps 1, 2 and 1000 of every batch of ds.
func checkRestamp(t *testing.T, ds *Dataset) {
	t.Helper()
	r := NewRestamper(ds)
	clock := detector.DefaultClock()
	perLap := map[[2]uint32]uint64{}
	for _, b := range ds.Batches {
		perLap[[2]uint32{uint32(b.Partition), b.Source}]++
	}
	var buf []byte
	var err error
	for _, lap := range []uint64{1, 2, 1000} {
		for i := range ds.Batches {
			b := &ds.Batches[i]
			data := ds.Data(b)
			buf, err = r.Restamp(buf[:0], b, lap)
			if err != nil {
				t.Fatal(err)
			}
			var orig, moved pb.FragmentBatch
			if err := proto.Unmarshal(data, &orig); err != nil {
				t.Fatal(err)
			}
			if err := proto.Unmarshal(buf, &moved); err != nil {
				t.Fatal(err)
			}
			if string(buf[len(buf)-stampRoom:]) != string(data[len(data)-stampRoom:]) {
				t.Fatal("the stamp room moved")
			}
			want := proto.Clone(&orig).(*pb.FragmentBatch)
			want.Sequence += lap * perLap[[2]uint32{uint32(b.Partition), b.Source}]
			for _, f := range want.Fragments {
				orbit := f.Orbit + lap*ds.LapOrbits
				f.TimestampNs += clock.Nominal(orbit, f.Bcid) - clock.Nominal(f.Orbit, f.Bcid)
				f.Orbit = orbit
				f.Seal()
			}
			if !proto.Equal(want, &moved) {
				t.Fatalf("lap %d of batch %d:\n got %v\nwant %v", lap, i, &moved, want)
			}
			for _, f := range moved.Fragments {
				if !f.Intact() {
					t.Fatalf("lap %d: fragment of source %d fails its checksum", lap, f.SourceId)
				}
			}
			// Byte for byte as proto.Marshal writes it, once the batch's
			// own sent time is set aside.
			var inner pb.FragmentBatch
			if err := proto.Unmarshal(data[:len(data)-stampRoom], &inner); err != nil {
				t.Fatal(err)
			}
			want.SentUnixNs = inner.SentUnixNs
			exp, err := proto.Marshal(want)
			if err != nil {
				t.Fatal(err)
			}
			if got := buf[:len(buf)-stampRoom]; string(got) != string(exp) {
				t.Fatalf("lap %d of batch %d: bytes differ from proto.Marshal\n got %x\nwant %x", lap, i, got, exp)
			}
		}
	}
}

// A fragment of a layout the fast path does not know is restamped by
// decoding it.
func TestRestampOtherLayouts(t *testing.T) {
	ds, err := Generate(GenerateConfig{Crossings: 200, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	// A fragment with a field the readout does not write (15): proto
	// keeps it aside.
	f := &pb.Fragment{SourceId: 1, Run: 1, Orbit: 0, Bcid: 1, TimestampNs: 25, Payload: &pb.Fragment_Muon{Muon: &pb.MuonPayload{Hits: []*pb.MuonHit{{Station: 1, XMm: 2}}}}}
	f.Seal()
	raw, _ := proto.Marshal(f)
	raw = protowire.AppendVarint(protowire.AppendTag(raw[:len(raw):len(raw)], 15, protowire.VarintType), 7)
	data := protowire.AppendBytes(protowire.AppendTag(nil, 5, protowire.BytesType), raw)
	b := &Batch{Source: 1}
	ds.keep(b, data, time.Now().UnixNano())
	out, err := NewRestamper(ds).Restamp(nil, b, 2)
	if err != nil {
		t.Fatal(err)
	}
	var moved pb.FragmentBatch
	if err := proto.Unmarshal(out, &moved); err != nil {
		t.Fatal(err)
	}
	g := moved.Fragments[0]
	if g.Orbit != 2*ds.LapOrbits || !g.Intact() || g.GetMuon() == nil {
		t.Fatalf("moved fragment %v", g)
	}
}

// BenchmarkRestamp measures moving the dataset's batches one lap on: the
// restamper's rewrite, and decoding and encoding every fragment for
// comparison.
func BenchmarkRestamp(b *testing.B) {
	ds, err := Generate(GenerateConfig{Crossings: 4000, Seed: 3})
	if err != nil {
		b.Fatal(err)
	}
	b.Run("rewrite", func(b *testing.B) {
		r := NewRestamper(ds)
		var buf []byte
		frags := 0
		b.ReportAllocs()
		for i := 0; b.Loop(); i++ {
			bt := &ds.Batches[i%len(ds.Batches)]
			buf, _ = r.Restamp(buf[:0], bt, 1+uint64(i/len(ds.Batches)))
			frags += bt.Fragments
		}
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(frags), "ns/fragment")
	})
	b.Run("decode-encode", func(b *testing.B) {
		r := NewRestamper(ds)
		var buf []byte
		frags := 0
		b.ReportAllocs()
		for i := 0; b.Loop(); i++ {
			bt := &ds.Batches[i%len(ds.Batches)]
			var fb pb.FragmentBatch
			if err := proto.Unmarshal(ds.Data(bt), &fb); err != nil {
				b.Fatal(err)
			}
			buf = buf[:0]
			for _, f := range fb.Fragments {
				raw, _ := proto.Marshal(f)
				buf, _ = r.slow(buf, raw, ds.LapOrbits)
			}
			frags += bt.Fragments
		}
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(frags), "ns/fragment")
	})
}
