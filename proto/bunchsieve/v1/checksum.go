package bunchsievev1

import (
	"encoding/binary"
	"hash/crc32"
	"math"
	"sync"
)

// castagnoli is the CRC-32C table; crc32 uses the processor's CRC
// instructions for it where there are any.
var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// checksumBuf is the scratch size a Checksummer streams bytes through;
// larger payloads go through in pieces.
const checksumBuf = 1024

// Checksummer computes fragment checksums through a scratch buffer of its
// own, so that the hot paths of the readout and the builder checksum
// without allocating. The zero value is ready; a Checksummer is not safe
// for concurrent use.
type Checksummer struct {
	buf []byte
}

// Sum returns the CRC-32C of f's canonical content: source_id, run,
// orbit, bcid, timestamp_ns and status as little-endian fixed-width
// integers, then the payload (calorimeter: each tower index and ET count
// as uint32 pairs, then any surplus counts; muon: station as uint32 and x,
// y, z as IEEE-754 float32 bits). The checksum field itself is not
// covered. See docs/wire-format.md.
func (c *Checksummer) Sum(f *Fragment) uint32 {
	le := binary.LittleEndian
	buf, n := c.header(f)
	var sum uint32
	switch p := f.GetPayload().(type) {
	case *Fragment_Calo:
		towers, counts := p.Calo.GetTowers(), p.Calo.GetEtCounts()
		for i, tw := range towers {
			if n+8 > len(buf) {
				sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
			}
			var v uint32
			if i < len(counts) {
				v = counts[i]
			}
			le.PutUint32(buf[n:], tw)
			le.PutUint32(buf[n+4:], v)
			n += 8
		}
		// A count without a tower still changes the sum, so a payload whose
		// two arrays disagree in length cannot pass as intact.
		for i := len(towers); i < len(counts); i++ {
			if n+4 > len(buf) {
				sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
			}
			le.PutUint32(buf[n:], counts[i])
			n += 4
		}
	case *Fragment_Muon:
		for _, h := range p.Muon.GetHits() {
			if n+16 > len(buf) {
				sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
			}
			le.PutUint32(buf[n:], h.GetStation())
			le.PutUint32(buf[n+4:], math.Float32bits(h.GetXMm()))
			le.PutUint32(buf[n+8:], math.Float32bits(h.GetYMm()))
			le.PutUint32(buf[n+12:], math.Float32bits(h.GetZMm()))
			n += 16
		}
	}
	return crc32.Update(sum, castagnoli, buf[:n])
}

// header writes f's header fields into the scratch as the canonical
// content begins, allocating the scratch on first use, and returns the
// scratch and the bytes written.
func (c *Checksummer) header(f *Fragment) ([]byte, int) {
	if c.buf == nil {
		c.buf = make([]byte, checksumBuf)
	}
	le := binary.LittleEndian
	buf := c.buf
	le.PutUint32(buf[0:], f.GetSourceId())
	le.PutUint32(buf[4:], f.GetRun())
	le.PutUint64(buf[8:], f.GetOrbit())
	le.PutUint32(buf[16:], f.GetBcid())
	le.PutUint64(buf[20:], uint64(f.GetTimestampNs()))
	le.PutUint32(buf[28:], f.GetStatus())
	return buf, 32
}

var checksummers = sync.Pool{New: func() any { return new(Checksummer) }}

// FragmentChecksum returns Checksummer.Sum(f) using a pooled scratch
// buffer. It is safe for concurrent use.
func FragmentChecksum(f *Fragment) uint32 {
	c := checksummers.Get().(*Checksummer)
	sum := c.Sum(f)
	checksummers.Put(c)
	return sum
}

// Seal sets f's checksum from its content.
func (f *Fragment) Seal() { f.Checksum = FragmentChecksum(f) }

// Intact reports whether f's checksum matches its content.
func (f *Fragment) Intact() bool { return f.GetChecksum() == FragmentChecksum(f) }
