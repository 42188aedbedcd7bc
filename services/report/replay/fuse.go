package replay

import (
	"encoding/binary"
	"hash/crc32"
	"slices"

	"google.golang.org/protobuf/encoding/protowire"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Decoding a calorimeter fragment in one pass. Decoding the packed tower
// and count lists into arrays, checksumming the arrays, then turning them
// into grid towers reads every number three times. For a fragment in the
// readout's canonical layout (as proto.Marshal writes it: the header
// fields and the checksum, then one calorimeter payload holding the
// towers packed, then the counts packed, each at most once; the order of
// the fragment's own fields does not matter) the pass reads the two lists
// once, in step, feeding the checksum and keeping the towers the
// selection will see as towerWords; filling the event (fillSlots)
// concatenates an event's into the words of trigger.CountTowers.
// A fragment with an empty muon payload takes the pass too. Anything
// else (a muon payload with hits, unpacked or split lists, unknown
// fields, a payload given twice, a count beyond 16 bits, bad encodings)
// goes through decodeFragment, Checksummer.Sum and towerTable.fill, the
// reference path, so the outcome never depends on which path a fragment
// took.

// castagnoli is the CRC-32C table; crc32 uses the processor's CRC
// instructions for it where there are any.
var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// fuseBuf is the size of the scratch a fuser streams canonical content
// through on its way to the CRC.
const fuseBuf = 1024

// fuser decodes fragments and checks their checksums, through the fused
// pass where the layout allows it. Its scratch is a field rather than a
// local: crc32 calls through a function value, so a local buffer would
// escape and be allocated per call. A fuser is used by one goroutine.
type fuser struct {
	// table gives the towers; nil disables the fused pass (a geometry
	// too wide for GridTowers or for a towerWord's index).
	table *towerTable
	sum   pb.Checksummer
	buf   [fuseBuf]byte
}

// newFuser returns a fuser keeping the towers of t, or one that always
// takes the reference path when t is nil, not a grid table, or larger
// than a towerWord's index can address.
func newFuser(t *towerTable) *fuser {
	if t != nil && (t.wide != nil || len(t.cells) > 1<<16) {
		t = nil
	}
	return &fuser{table: t}
}

// decodeFields decodes one Fragment message, which canonicalFields has
// read with the given outcome, into s and reports whether its checksum
// matches its content: through fuseFields where the layout allows, else
// through decodeFragment and Checksummer.Sum.
func (fz *fuser) decodeFields(data []byte, canonical bool, hdr *[10]uint64, payload []byte, num byte, s *slot) (intact bool, err error) {
	if canonical {
		if sum, ok := fz.fuseFields(hdr, payload, num, s); ok {
			return sum == s.f.Checksum, nil
		}
	}
	s.fused = false
	if err := decodeFragment(data, s); err != nil {
		return false, err
	}
	return fz.sum.Sum(&s.f) == s.f.Checksum, nil
}

// fuseFields decodes a calorimeter fragment in the canonical layout, or
// a fragment with an empty muon payload, that canonicalFields has read
// into hdr and payload, into s in one pass and returns the CRC-32C of its
// canonical content, the value Checksummer.Sum gives. On success s.f
// holds the header fields and the checksum, with a nil Payload, and
// s.towers the towers towerTable.fill makes of its payload. It reports
// false, with s in an unspecified state, for any other layout.
func (fz *fuser) fuseFields(hdr *[10]uint64, payload []byte, num byte, s *slot) (uint32, bool) {
	if fz.table == nil || num == 8 && len(payload) > 0 {
		// A muon payload with hits takes the general path.
		return 0, false
	}
	// An empty muon payload (a sector without hits, as most are) has the
	// canonical content of its header alone, as an empty calorimeter
	// payload has: splitCalo gives no lists for it.
	towers, counts, ok := splitCalo(payload)
	if !ok {
		return 0, false
	}

	f := &s.f
	setHeader(f, hdr)
	f.Payload = nil

	le := binary.LittleEndian
	buf := fz.buf[:]
	// The header as Checksummer.Sum lays it out.
	le.PutUint32(buf[0:], f.SourceId)
	le.PutUint32(buf[4:], f.Run)
	le.PutUint64(buf[8:], f.Orbit)
	le.PutUint32(buf[16:], f.Bcid)
	le.PutUint64(buf[20:], uint64(f.TimestampNs))
	le.PutUint32(buf[28:], f.Status)
	n := 32
	var sum uint32

	// Every value takes at least a byte, so the shorter list's length
	// bounds the number of pairs.
	out := slices.Grow(s.towers[:0], min(len(towers), len(counts)))
	out = out[:cap(out)]
	ncells := len(fz.table.cells)
	j := 0
	ti, ci := 0, 0
	for ti < len(towers) && ci < len(counts) {
		if n+32 > len(buf) {
			sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
		}
		// Four pairs at once where the next four towers are two-byte
		// varints and the next four counts one-byte ones, as nearly all
		// of a crossing's are (indices of 128 and up, counts below 32
		// GeV): the continuation bits of eight tower bytes and four
		// count bytes are tested in two words, with no branch per value.
		if ti+8 <= len(towers) && ci+4 <= len(counts) {
			tb, cb := le.Uint64(towers[ti:]), le.Uint32(counts[ci:])
			if tb&0x8080808080808080 == 0x0080008000800080 && cb&0x80808080 == 0 {
				t0 := uint32(tb)&0x7f | uint32(tb>>8)&0x7f<<7
				t1 := uint32(tb>>16)&0x7f | uint32(tb>>24)&0x7f<<7
				t2 := uint32(tb>>32)&0x7f | uint32(tb>>40)&0x7f<<7
				t3 := uint32(tb>>48)&0x7f | uint32(tb>>56)&0x7f<<7
				c0, c1, c2, c3 := cb&0xff, cb>>8&0xff, cb>>16&0xff, cb>>24
				b := buf[n : n+32]
				le.PutUint64(b[0:], uint64(t0)|uint64(c0)<<32)
				le.PutUint64(b[8:], uint64(t1)|uint64(c1)<<32)
				le.PutUint64(b[16:], uint64(t2)|uint64(c2)<<32)
				le.PutUint64(b[24:], uint64(t3)|uint64(c3)<<32)
				n += 32
				o := out[j : j+4]
				// Zero counts and indices off the table give no tower.
				// Nearly always all four are kept (the readout
				// suppresses zeros): then the four stores do not wait
				// for each other's index. The counts are below 0x80 here,
				// so a byte is zero exactly when subtracting one from it
				// sets its top bit.
				if (cb-0x01010101)&0x80808080 == 0 && max(t0, t1, t2, t3) < uint32(ncells) {
					o[0], o[1], o[2], o[3] = towerWord(t0|c0<<16), towerWord(t1|c1<<16), towerWord(t2|c2<<16), towerWord(t3|c3<<16)
					j += 4
					ti, ci = ti+8, ci+4
					continue
				}
				o[0] = towerWord(t0 | c0<<16)
				j += keep(t0, c0, ncells)
				o = out[j : j+3]
				o[0] = towerWord(t1 | c1<<16)
				j += keep(t1, c1, ncells)
				o = out[j : j+2]
				o[0] = towerWord(t2 | c2<<16)
				j += keep(t2, c2, ncells)
				o = out[j : j+1]
				o[0] = towerWord(t3 | c3<<16)
				j += keep(t3, c3, ncells)
				ti, ci = ti+8, ci+4
				continue
			}
		}
		// packedNext by hand: it is too large for the compiler to inline.
		var tw, ct uint32
		if c := towers[ti]; c < 0x80 {
			tw, ti = uint32(c), ti+1
		} else if ti+1 < len(towers) && towers[ti+1] < 0x80 {
			tw, ti = uint32(c&0x7f)|uint32(towers[ti+1])<<7, ti+2
		} else if tw, ti = packedSlow(towers, ti); ti < 0 {
			return 0, false
		}
		if c := counts[ci]; c < 0x80 {
			ct, ci = uint32(c), ci+1
		} else if ci+1 < len(counts) && counts[ci+1] < 0x80 {
			ct, ci = uint32(c&0x7f)|uint32(counts[ci+1])<<7, ci+2
		} else if ct, ci = packedSlow(counts, ci); ci < 0 {
			return 0, false
		}
		// The pair as two little-endian uint32s, in one store.
		le.PutUint64(buf[n:], uint64(tw)|uint64(ct)<<32)
		n += 8
		// fill's rules: zero counts and indices off the table give no
		// tower.
		if ct != 0 && int(tw) < ncells {
			if ct > 0xffff {
				// Beyond any readout's range; a towerWord cannot hold it.
				return 0, false
			}
			out[j] = towerWord(tw | ct<<16)
			j++
		}
	}
	// Surplus towers go in with a zero count, surplus counts alone, as
	// Checksummer.Sum has them.
	for ti < len(towers) {
		var tw uint32
		if tw, ti = packedNext(towers, ti); ti < 0 {
			return 0, false
		}
		if n+8 > len(buf) {
			sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
		}
		le.PutUint32(buf[n:], tw)
		le.PutUint32(buf[n+4:], 0)
		n += 8
	}
	for ci < len(counts) {
		var ct uint32
		if ct, ci = packedNext(counts, ci); ci < 0 {
			return 0, false
		}
		if n+4 > len(buf) {
			sum, n = crc32.Update(sum, castagnoli, buf[:n]), 0
		}
		le.PutUint32(buf[n:], ct)
		n += 4
	}
	s.towers = out[:j]
	s.fused = true
	return crc32.Update(sum, castagnoli, buf[:n]), true
}

// canonicalFields reads a Fragment message in the layout the one-pass
// decoder takes: one-byte tags (fields 1 to 15), the varint header fields
// 1 to 6 and the checksum, field 9, in any order (a later occurrence
// winning, as protobuf decodes), and exactly one payload, field 7 or 8. It
// leaves the header values in hdr by field number and returns the payload
// and its field number; ok is false for any other layout.
func canonicalFields(data []byte, hdr *[10]uint64) (payload []byte, num byte, ok bool) {
	seen := false
	for len(data) > 0 {
		tag := data[0]
		data = data[1:]
		n, typ := tag>>3, protowire.Type(tag&7)
		switch {
		case typ == protowire.VarintType && (n >= 1 && n <= 6 || n == 9):
			v, k := protowire.ConsumeVarint(data)
			if k < 0 {
				return nil, 0, false
			}
			data = data[k:]
			hdr[n] = v
		case typ == protowire.BytesType && (n == 7 || n == 8) && !seen:
			v, k := protowire.ConsumeBytes(data)
			if k < 0 {
				return nil, 0, false
			}
			data = data[k:]
			payload, num, seen = v, n, true
		default:
			return nil, 0, false
		}
	}
	return payload, num, seen
}

// setHeader sets the header fields and the checksum of f from the values
// canonicalFields read, converted as protobuf converts them.
func setHeader(f *pb.Fragment, hdr *[10]uint64) {
	f.SourceId, f.Run, f.Orbit, f.Bcid = uint32(hdr[1]), uint32(hdr[2]), hdr[3], uint32(hdr[4])
	f.TimestampNs, f.Status, f.Checksum = int64(hdr[5]), uint32(hdr[6]), uint32(hdr[9])
}

// keep is 1 when a tower of index tw and count ct is one the selection
// sees: a nonzero count at an index on the table.
func keep(tw, ct uint32, ncells int) int {
	if ct != 0 && int(tw) < ncells {
		return 1
	}
	return 0
}

// splitCalo splits a CaloPayload encoding in the canonical layout (the
// towers packed, then the counts packed, each at most once and nothing
// else) into its two packed lists; ok is false for any other layout.
func splitCalo(p []byte) (towers, counts []byte, ok bool) {
	const towersTag, countsTag = 1<<3 | byte(protowire.BytesType), 2<<3 | byte(protowire.BytesType)
	if len(p) > 0 && p[0] == towersTag {
		v, n := protowire.ConsumeBytes(p[1:])
		if n < 0 {
			return nil, nil, false
		}
		towers, p = v, p[1+n:]
	}
	if len(p) > 0 && p[0] == countsTag {
		v, n := protowire.ConsumeBytes(p[1:])
		if n < 0 {
			return nil, nil, false
		}
		counts, p = v, p[1+n:]
	}
	return towers, counts, len(p) == 0
}

// packedNext decodes the varint at b[i:], i < len(b), truncated to 32
// bits as protobuf decodes uint32, and returns it with the index after
// it, or with -1 for a bad varint. One- and two-byte varints, nearly all
// of a tower list, are decoded inline.
func packedNext(b []byte, i int) (uint32, int) {
	c := b[i]
	if c < 0x80 {
		return uint32(c), i + 1
	}
	if i+1 < len(b) && b[i+1] < 0x80 {
		return uint32(c&0x7f) | uint32(b[i+1])<<7, i + 2
	}
	return packedSlow(b, i)
}

func packedSlow(b []byte, i int) (uint32, int) {
	v, k := protowire.ConsumeVarint(b[i:])
	if k < 0 {
		return 0, -1
	}
	return uint32(v), i + k
}

// towerWord is a tower the selection sees: its global index on the
// table in the low 16 bits, its nonzero ET in least counts in the high
// 16, a word of trigger.CountTowers. A quarter of the size of a
// GridTower: a slot's towers wait in their lane until the builder emits
// their event, and the fewer bytes they take the more of them stay in
// cache; and the selection reads them as they are.
type towerWord = uint32
