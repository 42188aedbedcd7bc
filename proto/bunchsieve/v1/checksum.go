package bunchsievev1

import (
	"encoding/binary"
	"hash/crc32"
	"math"
)

// castagnoli is the CRC-32C table; the polynomial has hardware support on
// amd64 and arm64, which keeps checksumming off the profile.
var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// FragmentChecksum returns the CRC-32C of f's canonical content: source_id,
// run, orbit, bcid, timestamp_ns and status as little-endian fixed-width
// integers, then the payload (calorimeter: each tower index and ET count as
// uint32 pairs; muon: station as uint32 and x, y, z as IEEE-754 float32 bits).
// The checksum field itself is not covered. It is safe for concurrent use.
func FragmentChecksum(f *Fragment) uint32 {
	var buf [64]byte
	b := buf[:0]
	b = binary.LittleEndian.AppendUint32(b, f.GetSourceId())
	b = binary.LittleEndian.AppendUint32(b, f.GetRun())
	b = binary.LittleEndian.AppendUint64(b, f.GetOrbit())
	b = binary.LittleEndian.AppendUint32(b, f.GetBcid())
	b = binary.LittleEndian.AppendUint64(b, uint64(f.GetTimestampNs()))
	b = binary.LittleEndian.AppendUint32(b, f.GetStatus())
	sum := crc32.Update(0, castagnoli, b)
	switch p := f.GetPayload().(type) {
	case *Fragment_Calo:
		sum = updateCalo(sum, p.Calo)
	case *Fragment_Muon:
		for _, h := range p.Muon.GetHits() {
			b = b[:0]
			b = binary.LittleEndian.AppendUint32(b, h.GetStation())
			b = binary.LittleEndian.AppendUint32(b, math.Float32bits(h.GetXMm()))
			b = binary.LittleEndian.AppendUint32(b, math.Float32bits(h.GetYMm()))
			b = binary.LittleEndian.AppendUint32(b, math.Float32bits(h.GetZMm()))
			sum = crc32.Update(sum, castagnoli, b)
		}
	}
	return sum
}

func updateCalo(sum uint32, c *CaloPayload) uint32 {
	towers, counts := c.GetTowers(), c.GetEtCounts()
	var buf [64]byte
	b := buf[:0]
	for i := range towers {
		var n uint32
		if i < len(counts) {
			n = counts[i]
		}
		b = binary.LittleEndian.AppendUint32(b, towers[i])
		b = binary.LittleEndian.AppendUint32(b, n)
		if len(b) == len(buf) {
			sum = crc32.Update(sum, castagnoli, b)
			b = b[:0]
		}
	}
	// A count without a tower still changes the sum, so a payload whose two
	// arrays disagree in length cannot pass as intact.
	for i := len(towers); i < len(counts); i++ {
		b = binary.LittleEndian.AppendUint32(b, counts[i])
		if len(b) >= len(buf)-4 {
			sum = crc32.Update(sum, castagnoli, b)
			b = b[:0]
		}
	}
	return crc32.Update(sum, castagnoli, b)
}

// Seal sets f's checksum from its content.
func (f *Fragment) Seal() { f.Checksum = FragmentChecksum(f) }

// Intact reports whether f's checksum matches its content.
func (f *Fragment) Intact() bool { return f.GetChecksum() == FragmentChecksum(f) }
