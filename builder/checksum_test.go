package builder

import (
	"math/rand/v2"
	"testing"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// The builder's own checksum must agree with the wire format's,
// pb.FragmentChecksum, on every kind of payload, including ones longer
// than its scratch buffer and calorimeter arrays of unequal length.
func TestChecksumMatchesWireFormat(t *testing.T) {
	b, err := New(Config{Sources: []uint32{1}}, func(*Event) {})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	lengths := []int{0, 1, 2, 7, 8, 9, 127, 128, 129, 300}
	for i := range 2000 {
		f := &pb.Fragment{SourceId: rng.Uint32(), Run: rng.Uint32(), Orbit: rng.Uint64(), Bcid: rng.Uint32(),
			TimestampNs: int64(rng.Uint64()), Status: rng.Uint32(), Checksum: rng.Uint32()}
		switch i % 5 {
		case 1, 2:
			nt, nc := lengths[rng.IntN(len(lengths))], lengths[rng.IntN(len(lengths))]
			if i%5 == 1 {
				nc = nt
			}
			c := &pb.CaloPayload{}
			for range nt {
				c.Towers = append(c.Towers, rng.Uint32())
			}
			for range nc {
				c.EtCounts = append(c.EtCounts, rng.Uint32())
			}
			f.Payload = &pb.Fragment_Calo{Calo: c}
		case 3:
			m := &pb.MuonPayload{}
			for range lengths[rng.IntN(len(lengths))] {
				m.Hits = append(m.Hits, &pb.MuonHit{Station: rng.Uint32(), XMm: rng.Float32(), YMm: -rng.Float32() * 1e4, ZMm: rng.Float32()})
			}
			f.Payload = &pb.Fragment_Muon{Muon: m}
		case 4:
			if rng.IntN(2) == 0 {
				f.Payload = &pb.Fragment_Calo{}
			} else {
				f.Payload = &pb.Fragment_Muon{}
			}
		}
		if got, want := b.checksum(f), pb.FragmentChecksum(f); got != want {
			t.Fatalf("fragment %d (%v): checksum %#x, wire format says %#x", i, f, got, want)
		}
	}
}

func TestChecksumDoesNotAllocate(t *testing.T) {
	b, err := New(Config{Sources: []uint32{1}}, func(*Event) {})
	if err != nil {
		t.Fatal(err)
	}
	f := frag(1, 0, 1, 2)
	if n := testing.AllocsPerRun(100, func() { b.checksum(f) }); n != 0 {
		t.Errorf("checksum allocates %v times", n)
	}
}
