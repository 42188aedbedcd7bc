package loadtest

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math/bits"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// A run longer than its dataset replays the stream in laps. Lap k is lap
// 0 moved k*LapOrbits orbits later: every fragment's orbit and timestamp
// shift, its checksum follows, and every batch's sequence number moves on
// by the batches a source sends per lap, so the builder sees new crossings
// of one long run. Nothing is generated again and no fragment is decoded
// into a message: the restamper rewrites the few varints that change and
// updates the CRC-32C through its linearity (below), which costs about a
// tenth of decoding and encoding the fragment (BenchmarkRestamp).
//
// A crossing keeps the builder share it had in lap 0: the shares of later
// laps do not follow builder.Partition, which no builder checks.

// The checksum is the CRC-32C of a fixed layout (proto/bunchsieve/v1/
// checksum.go, docs/wire-format.md) in which only the orbit (bytes 8-15)
// and the timestamp (bytes 20-27) change. For messages of equal length a
// CRC with initial value and final xor is affine: crc(M ^ D) = crc(M) ^
// crc(D) ^ crc(0...0), and crc(D) ^ crc(0...0) is the CRC of D with a zero
// register and no final xor (Williams, "A painless guide to CRC error
// detection algorithms", 1993, sections 7 and 17, from memory). The new
// checksum is therefore the old one xor that register-only CRC of the
// changed bits, run over the rest of the layout's length; a test checks it
// against Checksummer.Sum.

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// Offsets in the checksummed layout.
const (
	sumOrbitAt = 8
	sumTimeAt  = 20
	sumFixed   = 32 // the fixed part before the payload
)

// Restamper rewrites a dataset's batches for later laps. It is not safe
// for concurrent use: each feed has its own.
type Restamper struct {
	ds     *Dataset
	clock  detector.Clock
	perLap map[[2]uint32]uint64 // batches per lap of (partition, source)
	zeros  []byte
	delta  [sumFixed]byte
	frag   pb.Fragment // scratch of the slow path
}

// NewRestamper returns a restamper for ds.
func NewRestamper(ds *Dataset) *Restamper {
	r := &Restamper{ds: ds, clock: detector.DefaultClock(), perLap: map[[2]uint32]uint64{}, zeros: make([]byte, 4096)}
	for _, b := range ds.Batches {
		r.perLap[[2]uint32{uint32(b.Partition), b.Source}]++
	}
	return r
}

// fragFields is what the restamper reads of one Fragment encoding: the
// header fields, set by pb.SetFragmentVarint, and the calorimeter
// payload's bytes as they are.
type fragFields struct {
	hdr        pb.Fragment // scalar fields only; Payload stays nil
	payload    []byte      // the payload field's value
	payloadNum byte        // its field number: 7 calorimeter, 8 muon
	hasPayload bool
}

// Restamp appends to dst batch b as lap lap sends it. Lap 0 is b itself.
// The result ends with stamp room, as the batch's own bytes do.
func (r *Restamper) Restamp(dst []byte, b *Batch, lap uint64) ([]byte, error) {
	all := r.ds.Data(b)
	data := all[:len(all)-stampRoom]
	if lap == 0 {
		return append(dst, all...), nil
	}
	orbits := lap * r.ds.LapOrbits
	seqShift := lap * r.perLap[[2]uint32{uint32(b.Partition), b.Source}]
	// Batch fields are written back in their order, the changed ones with
	// their new value. Sequence 0 is left out as proto3 does, so a later
	// lap may have to put it in, before the first field numbered above it.
	wroteSeq := seqShift == 0
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return dst, fmt.Errorf("loadtest: restamp: %w", protowire.ParseError(n))
		}
		field := data
		data = data[n:]
		if !wroteSeq && num > 3 {
			dst = appendVarint(dst, 3, seqShift)
			wroteSeq = true
		}
		switch {
		case num == 3 && typ == protowire.VarintType:
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return dst, fmt.Errorf("loadtest: restamp: %w", protowire.ParseError(n))
			}
			data = data[n:]
			dst = protowire.AppendTag(dst, 3, protowire.VarintType)
			dst = protowire.AppendVarint(dst, v+seqShift)
			wroteSeq = true
		case num == 5 && typ == protowire.BytesType:
			f, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return dst, fmt.Errorf("loadtest: restamp: %w", protowire.ParseError(n))
			}
			data = data[n:]
			var err error
			if dst, err = r.fragment(dst, f, orbits); err != nil {
				return dst, err
			}
		default:
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return dst, fmt.Errorf("loadtest: restamp: %w", protowire.ParseError(n))
			}
			data = data[n:]
			dst = append(dst, field[:len(field)-len(data)]...)
		}
	}
	if !wroteSeq {
		dst = appendVarint(dst, 3, seqShift)
	}
	return append(dst, all[len(all)-stampRoom:]...), nil
}

// fragment appends field 5 holding fragment f moved by orbits.
func (r *Restamper) fragment(dst, f []byte, orbits uint64) ([]byte, error) {
	var ff fragFields
	size, ok := r.read(f, &ff)
	if !ok {
		return r.slow(dst, f, orbits)
	}
	h := &ff.hdr
	orbit := h.Orbit + orbits
	ts := h.TimestampNs + r.clock.Nominal(orbit, h.Bcid) - r.clock.Nominal(h.Orbit, h.Bcid)
	sum := h.Checksum ^ r.crcDelta(h.Orbit^orbit, uint64(h.TimestampNs^ts), size)

	n := varintField(uint64(h.SourceId)) + varintField(uint64(h.Run)) + varintField(orbit) + varintField(uint64(h.Bcid)) +
		varintField(uint64(ts)) + varintField(uint64(h.Status)) + varintField(uint64(sum))
	if ff.hasPayload {
		n += 1 + protowire.SizeBytes(len(ff.payload))
	}
	dst = protowire.AppendTag(dst, 5, protowire.BytesType)
	dst = protowire.AppendVarint(dst, uint64(n))
	dst = appendVarint(dst, 1, uint64(h.SourceId))
	dst = appendVarint(dst, 2, uint64(h.Run))
	dst = appendVarint(dst, 3, orbit)
	dst = appendVarint(dst, 4, uint64(h.Bcid))
	dst = appendVarint(dst, 5, uint64(ts))
	dst = appendVarint(dst, 6, uint64(h.Status))
	// The oneof payload last, where proto.Marshal puts it.
	dst = appendVarint(dst, 9, uint64(sum))
	if ff.hasPayload {
		dst = protowire.AppendTag(dst, protowire.Number(ff.payloadNum), protowire.BytesType)
		dst = protowire.AppendBytes(dst, ff.payload)
	}
	return dst, nil
}

// read parses a fragment of the readout's layout: one-byte tags, known
// varint fields, at most one payload, either calorimeter with its arrays
// packed once each or muon with hits only. It returns the size of the
// fragment's canonical content (Checksummer.Sum's layout), or ok false
// for any other layout.
func (r *Restamper) read(f []byte, ff *fragFields) (size int, ok bool) {
	size = sumFixed
	for len(f) > 0 {
		tag := f[0]
		if tag >= 0x80 {
			return 0, false
		}
		f = f[1:]
		num, typ := tag>>3, protowire.Type(tag&7)
		if num == 7 || num == 8 {
			if typ != protowire.BytesType || ff.hasPayload {
				return 0, false
			}
			p, n := protowire.ConsumeBytes(f)
			if n < 0 {
				return 0, false
			}
			f = f[n:]
			ff.payload, ff.payloadNum, ff.hasPayload = p, num, true
			if num == 8 {
				hits, ok := muonHits(p)
				if !ok {
					return 0, false
				}
				size += 16 * hits
				continue
			}
			towers, counts, ok := packedCounts(p)
			if !ok {
				return 0, false
			}
			size += 8*towers + 4*max(counts-towers, 0)
			continue
		}
		if typ != protowire.VarintType {
			return 0, false
		}
		v, n := uvarint(f)
		if n < 0 {
			return 0, false
		}
		f = f[n:]
		if !pb.SetFragmentVarint(&ff.hdr, protowire.Number(num), v) {
			return 0, false
		}
	}
	return size, true
}

// muonHits returns how many hits a MuonPayload encoding holds when it has
// nothing but hits (field 1, each occurrence one hit whatever it holds:
// the canonical content of a hit is 16 bytes, its fields zero where
// absent), or ok false.
func muonHits(p []byte) (hits int, ok bool) {
	const hitTag = 1<<3 | byte(protowire.BytesType)
	for len(p) > 0 {
		if p[0] != hitTag {
			return 0, false
		}
		m, n := protowire.ConsumeBytes(p[1:])
		if n < 0 {
			return 0, false
		}
		// Well formed inside, as proto.Unmarshal needs it.
		for len(m) > 0 {
			_, _, k := protowire.ConsumeField(m)
			if k < 0 {
				return 0, false
			}
			m = m[k:]
		}
		p = p[1+n:]
		hits++
	}
	return hits, true
}

// uvarint decodes a varint, with the short forms inline.
func uvarint(b []byte) (uint64, int) {
	if len(b) > 0 && b[0] < 0x80 {
		return uint64(b[0]), 1
	}
	if len(b) > 1 && b[1] < 0x80 {
		return uint64(b[0]&0x7f) | uint64(b[1])<<7, 2
	}
	return protowire.ConsumeVarint(b)
}

// packedCounts returns how many values the two packed arrays of a
// CaloPayload hold: the bytes that end a varint.
func packedCounts(p []byte) (towers, counts int, ok bool) {
	seen := [3]bool{}
	for len(p) > 0 {
		num, typ, n := pb.ConsumeTag(p)
		if n < 0 || typ != protowire.BytesType || (num != 1 && num != 2) || seen[num] {
			return 0, 0, false
		}
		seen[num] = true
		p = p[n:]
		v, n := protowire.ConsumeBytes(p)
		if n < 0 || (len(v) > 0 && v[len(v)-1] >= 0x80) {
			return 0, 0, false
		}
		p = p[n:]
		k := 0
		for len(v) >= 8 {
			// Bytes with the top bit clear end a varint: count them eight
			// at a time.
			w := binary.LittleEndian.Uint64(v)
			k += bits.OnesCount64(^w & 0x8080808080808080)
			v = v[8:]
		}
		for _, c := range v {
			if c < 0x80 {
				k++
			}
		}
		if num == 1 {
			towers = k
		} else {
			counts = k
		}
	}
	return towers, counts, true
}

// crcDelta returns the register-only CRC-32C of a layout of size bytes
// that is zero except for the orbit and timestamp bits that changed.
func (r *Restamper) crcDelta(orbitXor, tsXor uint64, size int) uint32 {
	d := r.delta[:]
	binary.LittleEndian.PutUint64(d[sumOrbitAt:], orbitXor)
	binary.LittleEndian.PutUint64(d[sumTimeAt:], tsXor)
	// A zero register stays zero over leading zero bytes: start at the
	// orbit. Update with register ^0 and a final ^ gives the bare register.
	c := ^crc32.Update(^uint32(0), castagnoli, d[sumOrbitAt:])
	for rest := size - sumFixed; rest > 0; {
		k := min(rest, len(r.zeros))
		c = ^crc32.Update(^c, castagnoli, r.zeros[:k])
		rest -= k
	}
	return c
}

// slow restamps a fragment of another layout by decoding and encoding it.
func (r *Restamper) slow(dst, f []byte, orbits uint64) ([]byte, error) {
	if err := proto.Unmarshal(f, &r.frag); err != nil {
		return dst, fmt.Errorf("loadtest: restamp: %w", err)
	}
	orbit := r.frag.Orbit + orbits
	r.frag.TimestampNs += r.clock.Nominal(orbit, r.frag.Bcid) - r.clock.Nominal(r.frag.Orbit, r.frag.Bcid)
	r.frag.Orbit = orbit
	r.frag.Seal()
	raw, err := proto.Marshal(&r.frag)
	if err != nil {
		return dst, fmt.Errorf("loadtest: restamp: %w", err)
	}
	dst = protowire.AppendTag(dst, 5, protowire.BytesType)
	return protowire.AppendBytes(dst, raw), nil
}

func varintField(v uint64) int {
	if v == 0 {
		return 0
	}
	return 1 + protowire.SizeVarint(v)
}

func appendVarint(b []byte, num protowire.Number, v uint64) []byte {
	if v == 0 {
		return b
	}
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}
