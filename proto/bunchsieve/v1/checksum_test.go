package bunchsievev1

import (
	"bytes"
	"encoding/binary"
	"hash/crc32"
	"math"
	"math/rand/v2"
	"testing"
)

// The standard check value of CRC-32C: the bytes "123456789" give
// 0xE3069283 (RFC 3720, appendix B.4; the CRC catalogue's "CRC-32/ISCSI").
func TestCastagnoliCheckValue(t *testing.T) {
	if got := crc32.Checksum([]byte("123456789"), castagnoli); got != 0xE3069283 {
		t.Fatalf("CRC-32C check value %#x, want 0xE3069283", got)
	}
}

// reference encodes the canonical content the slow, obvious way, as
// docs/wire-format.md describes it.
func reference(f *Fragment) uint32 {
	var b bytes.Buffer
	le := binary.LittleEndian
	binary.Write(&b, le, f.GetSourceId())
	binary.Write(&b, le, f.GetRun())
	binary.Write(&b, le, f.GetOrbit())
	binary.Write(&b, le, f.GetBcid())
	binary.Write(&b, le, f.GetTimestampNs())
	binary.Write(&b, le, f.GetStatus())
	if c := f.GetCalo(); c != nil {
		for i, tw := range c.Towers {
			var v uint32
			if i < len(c.EtCounts) {
				v = c.EtCounts[i]
			}
			binary.Write(&b, le, tw)
			binary.Write(&b, le, v)
		}
		for i := len(c.Towers); i < len(c.EtCounts); i++ {
			binary.Write(&b, le, c.EtCounts[i])
		}
	}
	if m := f.GetMuon(); m != nil {
		for _, h := range m.Hits {
			binary.Write(&b, le, h.Station)
			binary.Write(&b, le, math.Float32bits(h.XMm))
			binary.Write(&b, le, math.Float32bits(h.YMm))
			binary.Write(&b, le, math.Float32bits(h.ZMm))
		}
	}
	return crc32.Checksum(b.Bytes(), castagnoli)
}

func TestChecksumMatchesReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	lengths := []int{0, 1, 2, 7, 127, 128, 129, 300}
	var c Checksummer
	for i := range 2000 {
		f := &Fragment{SourceId: rng.Uint32(), Run: rng.Uint32(), Orbit: rng.Uint64(), Bcid: rng.Uint32(),
			TimestampNs: int64(rng.Uint64()), Status: rng.Uint32()}
		switch i % 4 {
		case 1, 2:
			p := &CaloPayload{}
			nt, nc := lengths[rng.IntN(len(lengths))], lengths[rng.IntN(len(lengths))]
			if i%4 == 1 {
				nc = nt
			}
			for range nt {
				p.Towers = append(p.Towers, rng.Uint32())
			}
			for range nc {
				p.EtCounts = append(p.EtCounts, rng.Uint32())
			}
			f.Payload = &Fragment_Calo{Calo: p}
		case 3:
			m := &MuonPayload{}
			for range lengths[rng.IntN(len(lengths))] {
				m.Hits = append(m.Hits, &MuonHit{Station: rng.Uint32(), XMm: rng.Float32(), YMm: -rng.Float32() * 1e4, ZMm: rng.Float32()})
			}
			f.Payload = &Fragment_Muon{Muon: m}
		}
		want := reference(f)
		if got := c.Sum(f); got != want {
			t.Fatalf("fragment %d: Sum %#x, reference %#x", i, got, want)
		}
		if got := FragmentChecksum(f); got != want {
			t.Fatalf("fragment %d: FragmentChecksum %#x, reference %#x", i, got, want)
		}
		f.Seal()
		if !f.Intact() {
			t.Fatal("sealed fragment not intact")
		}
		f.Status ^= 1
		if f.Intact() {
			t.Fatal("changed fragment still intact")
		}
	}
}

func TestChecksumDoesNotAllocate(t *testing.T) {
	f := &Fragment{SourceId: 3, Payload: &Fragment_Calo{Calo: &CaloPayload{Towers: []uint32{1, 2, 3}, EtCounts: []uint32{4, 5, 6}}}}
	FragmentChecksum(f)
	if n := testing.AllocsPerRun(1000, func() { f.Seal() }); n != 0 {
		t.Errorf("Seal allocates %v times", n)
	}
}
