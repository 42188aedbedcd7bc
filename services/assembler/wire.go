package assembler

import (
	"errors"
	"math"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Decoding fragment batches straight from the wire. proto.Unmarshal
// allocates every fragment, its payload and both tower slices for every
// batch; here fragments are decoded into pooled records that keep their
// slices from batch to batch, and each record remembers the exact bytes it
// was decoded from, so that a built event can be encoded by concatenating
// them instead of encoding every fragment again.
//
// The fast decoder understands the layout the readout writes, calorimeter
// and muon payloads. Anything else (unknown fields, a payload split into
// several occurrences, an unexpected wire type) is handed to
// proto.Unmarshal for that fragment, so the result is always what
// proto.Unmarshal gives.

// Field numbers of FragmentBatch, Fragment and CaloPayload
// (proto/bunchsieve/v1/fragment.proto).
const (
	batchSourceID  = 1
	batchRun       = 2
	batchSequence  = 3
	batchSent      = 4
	batchFragments = 5
	batchEnd       = 6

	// Fragment's varint fields are set by pb.SetFragmentVarint.
	fragCalo = 7
	fragMuon = 8

	caloTowers = 1
	caloCounts = 2

	muonHits    = 1
	hitStation  = 1
	hitX, hitY  = 2, 3
	hitZ        = 4
	hitMaxField = 4
)

// errWire reports bytes that are not a protobuf encoding.
var errWire = errors.New("assembler: malformed protobuf")

// heldFragment is a pooled fragment with the bytes it was decoded from.
// The builder holds &frag until the fragment's event is emitted.
type heldFragment struct {
	frag    pb.Fragment
	calo    pb.CaloPayload
	one     pb.Fragment_Calo
	muon    pb.MuonPayload
	oneMuon pb.Fragment_Muon
	hits    []pb.MuonHit // storage behind muon.Hits
	raw     []byte       // the fragment's encoding; points into the message
	// foreign is set when proto.Unmarshal filled frag: its payload is then
	// proto's own, and frag is reset before the record is used again.
	foreign bool
	// checked is set when the checksum was verified in decoding, straight
	// from a calorimeter payload in the readout's layout
	// (pb.Checksummer.SumPacked), and intact holds the outcome: frag then
	// has no payload, as nothing downstream reads it (the builder takes
	// the verdict, events carry raw).
	checked bool
	intact  bool
}

// wireBatch is one decoded FragmentBatch.
type wireBatch struct {
	sourceID   uint32
	sequence   uint64
	sentUnixNs int64
	endOfRun   bool
	frags      []*heldFragment
	// undecodable counts the fragments whose own bytes do not decode (the
	// batch around them does): they are left out of frags.
	undecodable int
}

// fragmentPool hands out heldFragments and finds them again from the
// *pb.Fragment the builder returns in an event. It is owned by one
// goroutine at a time (the assembler's mutex).
type fragmentPool struct {
	free  []*heldFragment
	owner map[*pb.Fragment]*heldFragment
	// sum and words serve the checksums taken in decoding; words is
	// scratch (SumPacked keeps no towers here).
	sum   pb.Checksummer
	words []uint32
}

func newFragmentPool() *fragmentPool {
	return &fragmentPool{owner: make(map[*pb.Fragment]*heldFragment)}
}

func (p *fragmentPool) get() *heldFragment {
	if n := len(p.free); n > 0 {
		h := p.free[n-1]
		p.free = p.free[:n-1]
		return h
	}
	h := &heldFragment{}
	h.one.Calo = &h.calo
	h.oneMuon.Muon = &h.muon
	p.owner[&h.frag] = h
	return h
}

// put returns h to the pool. A record proto.Unmarshal filled is reset
// first, so that nothing of proto's (unknown fields) stays in it.
func (p *fragmentPool) put(h *heldFragment) {
	h.raw = nil
	if h.foreign {
		proto.Reset(&h.frag)
		h.foreign = false
	}
	p.free = append(p.free, h)
}

// held returns the record of a fragment handed out by get, or nil.
func (p *fragmentPool) held(f *pb.Fragment) *heldFragment { return p.owner[f] }

// decodeBatch decodes data into wb, taking fragment records from p. On an
// error every record taken is returned to p and wb holds no fragments. The
// result equals proto.Unmarshal's: fields it does not know are skipped, as
// proto keeps them aside; scalar fields repeated on the wire take their
// last value. One difference: a fragment whose own bytes proto would
// refuse, in a batch that is otherwise sound, is left out and counted in
// wb.undecodable, where proto refuses the whole batch.
func decodeBatch(data []byte, wb *wireBatch, p *fragmentPool) error {
	*wb = wireBatch{frags: wb.frags[:0]}
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return wb.fail(p)
		}
		data = data[n:]
		switch {
		case typ == protowire.VarintType && num != batchFragments:
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return wb.fail(p)
			}
			data = data[n:]
			switch num {
			case batchSourceID:
				wb.sourceID = uint32(v)
			case batchSequence:
				wb.sequence = v
			case batchSent:
				wb.sentUnixNs = int64(v)
			case batchEnd:
				wb.endOfRun = protowire.DecodeBool(v)
			}
		case typ == protowire.BytesType && num == batchFragments:
			raw, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return wb.fail(p)
			}
			data = data[n:]
			h := p.get()
			if err := decodeFragment(raw, h, p); err != nil {
				// One damaged fragment must not cost its batch the
				// others: it is counted, they go on.
				p.put(h)
				wb.undecodable++
				continue
			}
			wb.frags = append(wb.frags, h)
		default:
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return wb.fail(p)
			}
			data = data[n:]
		}
	}
	return nil
}

// batchHeader reads a fragment batch's source and sequence number without
// decoding its fragments; ok is false if data is not a batch's encoding
// at the top level. Fields left at zero are not encoded, so the whole
// batch is walked.
func batchHeader(data []byte) (source uint32, seq uint64, ok bool) {
	for len(data) > 0 {
		num, typ, n := protowire.ConsumeTag(data)
		if n < 0 {
			return 0, 0, false
		}
		data = data[n:]
		if typ == protowire.VarintType && (num == batchSourceID || num == batchSequence) {
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return 0, 0, false
			}
			data = data[n:]
			if num == batchSourceID {
				source = uint32(v)
			} else {
				seq = v
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, data)
		if n < 0 {
			return 0, 0, false
		}
		data = data[n:]
	}
	return source, seq, true
}

func (wb *wireBatch) fail(p *fragmentPool) error {
	for _, h := range wb.frags {
		p.put(h)
	}
	wb.frags = wb.frags[:0]
	return errWire
}

// decodeFragment fills h from raw, the encoding of one Fragment, with
// p's checksummer.
func decodeFragment(raw []byte, h *heldFragment, p *fragmentPool) error {
	h.raw = raw
	if h.fast(raw, p) {
		return nil
	}
	h.checked = false
	// Not the readout's usual layout: let proto decide what it means.
	h.foreign = true
	h.raw = raw
	if err := proto.Unmarshal(raw, &h.frag); err != nil {
		return errWire
	}
	return nil
}

// fast decodes raw if it has only the fields the fast path knows, each
// with its proto wire type, and at most one calorimeter payload. A
// calorimeter payload in the readout's layout (pb.SplitCalo) is not
// decoded but checksummed with the header (h.checked). It reports false
// otherwise, leaving h in an unspecified state.
func (h *heldFragment) fast(raw []byte, p *fragmentPool) bool {
	f := &h.frag
	f.SourceId, f.Run, f.Orbit, f.Bcid, f.TimestampNs, f.Status, f.Checksum = 0, 0, 0, 0, 0, 0, 0
	f.Payload = nil
	h.calo.Towers, h.calo.EtCounts = h.calo.Towers[:0], h.calo.EtCounts[:0]
	h.checked = false
	var towers, counts []byte
	calo := false
	for len(raw) > 0 {
		if raw[0] == fragMuon<<3|byte(protowire.BytesType) {
			// At most one payload of either kind: proto merges or
			// replaces repeated ones.
			payload, n := protowire.ConsumeBytes(raw[1:])
			if n < 0 || f.Payload != nil || !h.decodeMuon(payload) {
				return false
			}
			raw = raw[1+n:]
			f.Payload = &h.oneMuon
			continue
		}
		// Every field of a Fragment has a one-byte tag.
		tag := raw[0]
		if tag >= 0x80 {
			return false
		}
		raw = raw[1:]
		num, typ := protowire.Number(tag>>3), protowire.Type(tag&7)
		if num == fragCalo {
			if typ != protowire.BytesType || calo || f.Payload != nil {
				return false
			}
			payload, n := protowire.ConsumeBytes(raw)
			if n < 0 {
				return false
			}
			var packed bool
			if towers, counts, packed = pb.SplitCalo(payload); packed {
				h.checked = true
			} else if !h.decodeCalo(payload) {
				return false
			}
			raw = raw[n:]
			calo = true
			f.Payload = &h.one
			continue
		}
		if typ != protowire.VarintType {
			return false
		}
		v, n := uvarint(raw)
		if n < 0 {
			return false
		}
		raw = raw[n:]
		if !pb.SetFragmentVarint(f, num, v) {
			return false
		}
	}
	if h.checked {
		// The header is complete only now: the fields may come in any
		// order.
		sum, words, ok := p.sum.SumPacked(f, towers, counts, 0, p.words[:0])
		if !ok {
			return false
		}
		p.words = words
		f.Payload = nil
		h.intact = sum == f.Checksum
	}
	return true
}

// decodeMuon fills h.muon from a MuonPayload encoding whose hits are
// written as proto.Marshal writes them: one-byte tags, the known fields
// each with its wire type.
func (h *heldFragment) decodeMuon(b []byte) bool {
	h.hits = h.hits[:0]
	for len(b) > 0 {
		if b[0] != muonHits<<3|byte(protowire.BytesType) {
			return false
		}
		m, n := protowire.ConsumeBytes(b[1:])
		if n < 0 {
			return false
		}
		b = b[1+n:]
		var hit pb.MuonHit
		for len(m) > 0 {
			tag := m[0]
			num, typ := tag>>3, protowire.Type(tag&7)
			m = m[1:]
			switch {
			case num == hitStation && typ == protowire.VarintType:
				v, n := uvarint(m)
				if n < 0 {
					return false
				}
				hit.Station, m = uint32(v), m[n:]
			case num >= hitX && num <= hitMaxField && typ == protowire.Fixed32Type:
				v, n := protowire.ConsumeFixed32(m)
				if n < 0 {
					return false
				}
				x := math.Float32frombits(v)
				switch num {
				case hitX:
					hit.XMm = x
				case hitY:
					hit.YMm = x
				default:
					hit.ZMm = x
				}
				m = m[n:]
			default:
				return false
			}
		}
		h.hits = append(h.hits, pb.MuonHit{Station: hit.Station, XMm: hit.XMm, YMm: hit.YMm, ZMm: hit.ZMm})
	}
	// Pointers are taken once the storage has stopped moving.
	h.muon.Hits = h.muon.Hits[:0]
	for i := range h.hits {
		h.muon.Hits = append(h.muon.Hits, &h.hits[i])
	}
	return true
}

// uvarint decodes a varint, with the one- and two-byte forms inline.
func uvarint(b []byte) (uint64, int) {
	if len(b) > 0 && b[0] < 0x80 {
		return uint64(b[0]), 1
	}
	if len(b) > 1 && b[1] < 0x80 {
		return uint64(b[0]&0x7f) | uint64(b[1])<<7, 2
	}
	return protowire.ConsumeVarint(b)
}

// decodeCalo appends the towers and counts of a CaloPayload encoding,
// packed or not, as proto does.
func (h *heldFragment) decodeCalo(b []byte) bool {
	for len(b) > 0 {
		num, typ, n := pb.ConsumeTag(b)
		if n < 0 || (num != caloTowers && num != caloCounts) {
			return false
		}
		b = b[n:]
		dst := &h.calo.Towers
		if num == caloCounts {
			dst = &h.calo.EtCounts
		}
		switch typ {
		case protowire.VarintType:
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return false
			}
			b = b[n:]
			*dst = append(*dst, uint32(v))
		case protowire.BytesType:
			packed, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return false
			}
			b = b[n:]
			var ok bool
			if *dst, ok = appendPacked(*dst, packed); !ok {
				return false
			}
		default:
			return false
		}
	}
	return true
}

// appendPacked appends the packed varints of b to dst as uint32 (proto
// truncates wider values the same way).
func appendPacked(dst []uint32, b []byte) ([]uint32, bool) {
	for len(b) > 0 {
		v, n := uvarint(b)
		if n < 0 {
			return dst, false
		}
		dst = append(dst, uint32(v))
		b = b[n:]
	}
	return dst, true
}
