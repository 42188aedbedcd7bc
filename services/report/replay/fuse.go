package replay

import (
	"google.golang.org/protobuf/encoding/protowire"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Decoding a calorimeter fragment in one pass. Decoding the packed tower
// and count lists into arrays, checksumming the arrays, then turning them
// into grid towers reads every number three times. For a fragment in the
// readout's canonical layout (as proto.Marshal writes it: the header
// fields and the checksum, then one calorimeter payload holding the
// towers packed, then the counts packed, each at most once; the order of
// the fragment's own fields does not matter) the pass
// (pb.Checksummer.SumPacked) reads the two lists once, in step, feeding
// the checksum and keeping the towers the selection will see as
// towerWords; filling the event (fillSlots)
// concatenates an event's into the words of trigger.CountTowers.
// A fragment with an empty muon payload takes the pass too. Anything
// else (a muon payload with hits, unpacked or split lists, unknown
// fields, a payload given twice, a count beyond 16 bits, bad encodings)
// goes through decodeFragment, Checksummer.Sum and towerTable.fill, the
// reference path, so the outcome never depends on which path a fragment
// took.

// fuser decodes fragments and checks their checksums, through the fused
// pass where the layout allows it. A fuser is used by one goroutine.
type fuser struct {
	// table gives the towers; nil disables the fused pass (a geometry
	// too wide for GridTowers or for a towerWord's index).
	table *towerTable
	sum   pb.Checksummer
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
	towers, counts, ok := pb.SplitCalo(payload)
	if !ok {
		return 0, false
	}
	f := &s.f
	setHeader(f, hdr)
	f.Payload = nil
	sum, words, ok := fz.sum.SumPacked(f, towers, counts, len(fz.table.cells), s.towers[:0])
	if !ok {
		return 0, false
	}
	s.towers = words
	s.fused = true
	return sum, true
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

// towerWord is a tower the selection sees: its global index on the
// table in the low 16 bits, its nonzero ET in least counts in the high
// 16, a word of trigger.CountTowers. A quarter of the size of a
// GridTower: a slot's towers wait in their lane until the builder emits
// their event, and the fewer bytes they take the more of them stay in
// cache; and the selection reads them as they are.
type towerWord = uint32
