package selector

import (
	"errors"
	"math"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Decoding event batches straight from the wire. proto.Unmarshal would
// allocate every event, every fragment and both tower slices of every
// payload, only for the towers to be copied into a trigger.Event; here the
// calorimeter payloads are read in place. Events whose fragments are not
// plain calorimeter fragments (a muon payload) go through proto.Unmarshal
// and FillEvent, the reference, so the towers and hits the menu sees are
// always FillEvent's.

// Field numbers (proto/bunchsieve/v1/event.proto and fragment.proto).
const (
	ebBuilder = 1
	ebEvents  = 3
	ebEnd     = 4
	ebTotal   = 5

	evRun       = 1
	evOrbit     = 2
	evBcid      = 3
	evLumi      = 5
	evFragments = 6
	evFlags     = 8
	evReadout   = 9

	fragCalo = 7
	fragMuon = 8

	caloTowers = 1
	caloCounts = 2

	muonHits   = 1
	hitStation = 1
	hitX       = 2
	hitZ       = 4

	progressWorker  = 1
	progressDecided = 2
)

// errWire reports bytes that are not a protobuf encoding.
var errWire = errors.New("selector: malformed protobuf")

// batchHeader is what an EventBatch says besides its events.
type batchHeader struct {
	builder  uint32
	endOfRun bool
	total    uint64
}

// walkBatch calls fn with the encoding of each event of an EventBatch, in
// order, and returns the batch's other fields. It stops at the first error
// of fn or of the encoding. Unknown fields and fields of an unexpected wire
// type are skipped, as proto.Unmarshal sets them aside.
func walkBatch(data []byte, fn func(event []byte) error) (batchHeader, error) {
	var h batchHeader
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return h, errWire
		}
		data = data[n:]
		if num == ebEvents && typ == protowire.BytesType {
			ev, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return h, errWire
			}
			data = data[n:]
			if fn != nil {
				if err := fn(ev); err != nil {
					return h, err
				}
			}
			continue
		}
		if typ == protowire.VarintType {
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return h, errWire
			}
			data = data[n:]
			switch num {
			case ebBuilder:
				h.builder = uint32(v)
			case ebEnd:
				h.endOfRun = protowire.DecodeBool(v)
			case ebTotal:
				h.total = v
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, data)
		if n < 0 {
			return h, errWire
		}
		data = data[n:]
	}
	return h, nil
}

// wireEvent is a BuiltEvent whose fragments are still encoded.
type wireEvent struct {
	run     uint32
	orbit   uint64
	bcid    uint32
	lumi    uint32
	flags   uint32
	readout int64
	frags   [][]byte // each fragment's encoding, pointing into the message
}

// decode reads the fields of one BuiltEvent encoding the selection uses.
func (we *wireEvent) decode(b []byte) error {
	*we = wireEvent{frags: we.frags[:0]}
	for len(b) > 0 {
		num, typ, n := pb.ConsumeTag(b)
		if n < 0 {
			return errWire
		}
		b = b[n:]
		if num == evFragments && typ == protowire.BytesType {
			f, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return errWire
			}
			b = b[n:]
			we.frags = append(we.frags, f)
			continue
		}
		if typ == protowire.VarintType {
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return errWire
			}
			b = b[n:]
			switch num {
			case evRun:
				we.run = uint32(v)
			case evOrbit:
				we.orbit = v
			case evBcid:
				we.bcid = uint32(v)
			case evLumi:
				we.lumi = uint32(v)
			case evFlags:
				we.flags = uint32(v)
			case evReadout:
				we.readout = int64(v)
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, b)
		if n < 0 {
			return errWire
		}
		b = b[n:]
	}
	return nil
}

// towerTable holds each tower's grid cell and layer as a trigger.GridTower
// with no energy, made once per geometry with the Geometry's own methods,
// so that a lookup gives what FillEvent computes per tower. The table of a
// whole calorimeter (8 bytes per tower) stays in the processor's cache. It
// is immutable and safe for concurrent use.
type towerTable struct {
	cells []trigger.GridTower // by global tower index; nil when wide
	lsb   float64
	g     *detector.Geometry
	wide  bool // bins beyond a GridTower's range: Towers, computed per tower
}

func newTowerTable(g *detector.Geometry) *towerTable {
	t := &towerTable{lsb: g.LeastCountGeV, g: g, wide: !gridForm(g)}
	if t.wide {
		return t
	}
	t.cells = make([]trigger.GridTower, g.Towers())
	for i := range t.cells {
		layer, ieta, iphi, _ := g.TowerCoords(i)
		t.cells[i] = trigger.GridTower{IEta: uint16(ieta), IPhi: uint16(iphi), Layer: uint8(layer)}
	}
	return t
}

// gridForm reports whether every tower of g fits a trigger.GridTower, the
// form the selection fills: bins and layers within its integer ranges.
// The GridTower stands for the Tower at its cell centre, and Geometry
// computes the centres with the formulas trigger.Grid uses (see GridOf),
// so the two forms give the same features.
func gridForm(g *detector.Geometry) bool {
	return g.EtaBins <= math.MaxUint16 && g.PhiBins <= math.MaxUint16 && detector.Layers <= math.MaxUint8+1
}

// wideTower returns the Tower of global index idx with counts c, as
// FillEvent makes it for a geometry too large for GridTowers, or false
// when idx is off the grid.
func wideTower(g *detector.Geometry, idx, c uint32) (trigger.Tower, bool) {
	layer, ieta, iphi, ok := g.TowerCoords(int(idx))
	if !ok {
		return trigger.Tower{}, false
	}
	return trigger.Tower{Layer: uint8(layer), IEta: ieta, IPhi: iphi, Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi), ET: g.ET(c)}, true
}

// add appends the tower of global index idx with counts c (not zero) to
// out, or to wide for a wide table; towers off the grid are skipped.
func (t *towerTable) add(out []trigger.GridTower, wide []trigger.Tower, idx, c uint32) ([]trigger.GridTower, []trigger.Tower) {
	if t.wide {
		if tw, ok := wideTower(t.g, idx, c); ok {
			wide = append(wide, tw)
		}
		return out, wide
	}
	if int(idx) < len(t.cells) {
		gt := t.cells[idx]
		// float64(counts) * least count, as Geometry.ET computes it.
		gt.ET = float64(c) * t.lsb
		out = append(out, gt)
	}
	return out, wide
}

// wireFill is the scratch of fillWire: one fragment's decoded arrays, and
// the pass that reads packed lists into the words of trigger.CountTowers
// (its checksum is not needed here: the builder checked it).
type wireFill struct {
	towers, counts []uint32
	pass           pb.Checksummer
}

// fillWire decodes the payloads of encoded fragments into ev, as
// FillEvent does for decoded ones: calorimeter towers and muon-station
// hits. It returns ok false, with ev unspecified, for a layout it leaves
// to the reference path (a muon payload not written as proto.Marshal
// writes it, or given together with another payload). It returns errWire
// for bytes that are not a protobuf encoding.
//
// Towers go into ev.Counted, 4-byte words read through the table, while
// every calorimeter payload so far was in the readout's layout; the first
// that is not turns the words into GridTowers and the rest of the event
// follows them there, so the towers keep their order either way (the
// features' sums depend on it).
func (t *towerTable) fillWire(frags [][]byte, lumiSlice uint32, ev *trigger.Event, sc *wireFill) (ok bool, err error) {
	out, wide, hits := ev.GridTowers[:0], ev.Towers[:0], ev.MuonHits[:0]
	ct := trigger.CountTowers{Words: ev.Counted.Words[:0], Cells: t.cells, GeVPerCount: t.lsb}
	counted := !t.wide && len(t.cells) <= 1<<16
	for _, raw := range frags {
		payload, kind := scanFragment(raw)
		switch kind {
		case fragNoPayload:
			continue
		case fragMuonPayload:
			if hits, ok = appendHits(hits, payload); !ok {
				return false, nil
			}
			continue
		case fragOnePayload:
			if towers, counts, ok := pb.SplitCalo(payload); ok {
				if counted {
					var more []uint32
					if more, ok = sc.pass.PackedWords(towers, counts, len(t.cells), ct.Words); ok {
						ct.Words = more
						continue
					}
					// A count the words cannot hold, or a bad list.
					out, ct.Words, counted = ct.AppendGridTowers(out), ct.Words[:0], false
				}
				if out, wide, ok = t.appendPairs(out, wide, towers, counts); ok {
					continue
				}
				return false, errWire
			}
		}
		if counted {
			out, ct.Words, counted = ct.AppendGridTowers(out), ct.Words[:0], false
		}
		// Any other layout: decode the arrays first, as proto does.
		plain, err := sc.decodeFragment(raw)
		if err != nil || !plain {
			return false, err
		}
		counts := sc.counts
		towers := sc.towers[:min(len(sc.towers), len(counts))]
		for i, idx := range towers {
			if c := counts[i]; c != 0 {
				out, wide = t.add(out, wide, idx, c)
			}
		}
	}
	ev.GridTowers, ev.Towers, ev.MuonHits = out, wide, hits
	ev.Counted = ct
	ev.LumiSlice = lumiSlice
	return true, nil
}

// appendHits appends the hits of a MuonPayload encoding written as
// proto.Marshal writes it (one-byte tags, station as a varint, x, y, z as
// fixed32 floats), as FillEvent converts them; ok is false for any other
// layout.
func appendHits(dst []trigger.MuonHit, b []byte) ([]trigger.MuonHit, bool) {
	for len(b) > 0 {
		if b[0] != muonHits<<3|byte(protowire.BytesType) {
			return dst, false
		}
		m, n := protowire.ConsumeBytes(b[1:])
		if n < 0 {
			return dst, false
		}
		b = b[1+n:]
		var station uint32
		var xyz [3]float32
		for len(m) > 0 {
			num, typ := m[0]>>3, protowire.Type(m[0]&7)
			m = m[1:]
			switch {
			case num == hitStation && typ == protowire.VarintType:
				v, n := uvarint32(m)
				if n < 0 {
					return dst, false
				}
				station, m = v, m[n:]
			case num >= hitX && num <= hitZ && typ == protowire.Fixed32Type:
				v, n := protowire.ConsumeFixed32(m)
				if n < 0 {
					return dst, false
				}
				xyz[num-hitX], m = math.Float32frombits(v), m[n:]
			default:
				return dst, false
			}
		}
		dst = append(dst, trigger.MuonHit{Station: int(station), X: float64(xyz[0]), Y: float64(xyz[1]), Z: float64(xyz[2])})
	}
	return dst, true
}

// appendPairs appends the towers of two packed arrays read in step: the
// i-th tower index with the i-th count, up to the shorter array, as
// FillEvent pairs them. The rest of the longer array must still be well
// formed, or proto would refuse the fragment.
func (t *towerTable) appendPairs(out []trigger.GridTower, wide []trigger.Tower, towers, counts []byte) ([]trigger.GridTower, []trigger.Tower, bool) {
	cells, lsb := t.cells, t.lsb
	for len(towers) > 0 && len(counts) > 0 {
		idx, n := uvarint32(towers)
		c, m := uvarint32(counts)
		if n < 0 || m < 0 {
			return out, wide, false
		}
		towers, counts = towers[n:], counts[m:]
		if c == 0 {
			continue
		}
		if t.wide {
			out, wide = t.add(out, wide, idx, c)
			continue
		}
		if int(idx) < len(cells) {
			gt := cells[idx]
			gt.ET = float64(c) * lsb
			out = append(out, gt)
		}
	}
	return out, wide, wellFormed(towers) && wellFormed(counts)
}

// uvarint32 decodes a varint as uint32 (proto truncates wider values the
// same way), with the one- and two-byte forms of tower indices and counts
// inline. n is negative for a malformed varint.
func uvarint32(b []byte) (uint32, int) {
	if len(b) > 0 && b[0] < 0x80 {
		return uint32(b[0]), 1
	}
	if len(b) > 1 && b[1] < 0x80 {
		return uint32(b[0]&0x7f) | uint32(b[1])<<7, 2
	}
	v, n := protowire.ConsumeVarint(b)
	return uint32(v), n
}

// wellFormed reports whether b is a sequence of valid varints.
func wellFormed(b []byte) bool {
	for len(b) > 0 {
		_, n := protowire.ConsumeVarint(b)
		if n < 0 {
			return false
		}
		b = b[n:]
	}
	return true
}

// What scanFragment found.
const (
	fragNoPayload   = iota // no payload field
	fragOnePayload         // one calorimeter payload
	fragOtherLayout        // payload given twice, or something to decode with care
	fragMuonPayload        // one muon payload
)

// scanFragment looks through a Fragment encoding for its payload without
// decoding the other fields.
func scanFragment(b []byte) (payload []byte, kind int) {
	kind = fragNoPayload
	for len(b) > 0 {
		var num protowire.Number
		var typ protowire.Type
		if b[0] < 0x80 {
			num, typ = protowire.Number(b[0]>>3), protowire.Type(b[0]&7)
			b = b[1:]
		} else {
			var n int
			if num, typ, n = pb.ConsumeTag(b); n < 0 {
				return nil, fragOtherLayout
			}
			b = b[n:]
		}
		switch {
		case typ == protowire.VarintType:
			k := 0
			for k < len(b) && k < 10 && b[k] >= 0x80 {
				k++
			}
			if k >= len(b) || k == 10 || (k == 9 && b[9] > 1) {
				return nil, fragOtherLayout
			}
			b = b[k+1:]
		case typ == protowire.BytesType:
			v, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return nil, fragOtherLayout
			}
			b = b[n:]
			if num == fragCalo || num == fragMuon {
				switch {
				case kind != fragNoPayload:
					kind = fragOtherLayout
				case num == fragCalo:
					payload, kind = v, fragOnePayload
				default:
					payload, kind = v, fragMuonPayload
				}
			}
		default:
			return nil, fragOtherLayout
		}
	}
	return payload, kind
}

// decodeFragment reads the calorimeter payload of one Fragment encoding
// into sc, with proto's meaning: a payload given more than once is merged
// (its arrays appended), fields of other numbers or wire types are not the
// payload. It reports plain false for a muon payload.
func (sc *wireFill) decodeFragment(b []byte) (plain bool, err error) {
	sc.towers, sc.counts = sc.towers[:0], sc.counts[:0]
	for len(b) > 0 {
		num, typ, n := pb.ConsumeTag(b)
		if n < 0 {
			return false, errWire
		}
		b = b[n:]
		if typ == protowire.BytesType && (num == fragCalo || num == fragMuon) {
			payload, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return false, errWire
			}
			b = b[n:]
			if num == fragMuon {
				return false, nil
			}
			if err := sc.decodeCalo(payload); err != nil {
				return false, err
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, b)
		if n < 0 {
			return false, errWire
		}
		b = b[n:]
	}
	return true, nil
}

func (sc *wireFill) decodeCalo(b []byte) error {
	for len(b) > 0 {
		num, typ, n := pb.ConsumeTag(b)
		if n < 0 {
			return errWire
		}
		b = b[n:]
		if num == caloTowers || num == caloCounts {
			dst := &sc.towers
			if num == caloCounts {
				dst = &sc.counts
			}
			switch typ {
			case protowire.BytesType:
				packed, n := protowire.ConsumeBytes(b)
				if n < 0 {
					return errWire
				}
				b = b[n:]
				var ok bool
				if *dst, ok = appendPacked(*dst, packed); !ok {
					return errWire
				}
				continue
			case protowire.VarintType:
				v, n := protowire.ConsumeVarint(b)
				if n < 0 {
					return errWire
				}
				b = b[n:]
				*dst = append(*dst, uint32(v))
				continue
			}
		}
		n = protowire.ConsumeFieldValue(num, typ, b)
		if n < 0 {
			return errWire
		}
		b = b[n:]
	}
	return nil
}

// appendPacked appends the packed varints of b to dst as uint32 (proto
// truncates wider values the same way).
func appendPacked(dst []uint32, b []byte) ([]uint32, bool) {
	for len(b) > 0 {
		if c := b[0]; c < 0x80 {
			dst = append(dst, uint32(c))
			b = b[1:]
			continue
		}
		v, n := protowire.ConsumeVarint(b)
		if n < 0 {
			return dst, false
		}
		dst = append(dst, uint32(v))
		b = b[n:]
	}
	return dst, true
}

// appendProgress encodes a worker's decided count for the progress subject:
// field 1 the worker number, field 2 the events it decided.
func appendProgress(b []byte, worker int, decided uint64) []byte {
	b = protowire.AppendTag(b, progressWorker, protowire.VarintType)
	b = protowire.AppendVarint(b, uint64(worker))
	b = protowire.AppendTag(b, progressDecided, protowire.VarintType)
	return protowire.AppendVarint(b, decided)
}

// parseProgress decodes a progress message.
func parseProgress(b []byte) (worker int, decided uint64, err error) {
	for len(b) > 0 {
		num, typ, n := pb.ConsumeTag(b)
		if n < 0 {
			return 0, 0, errWire
		}
		b = b[n:]
		if typ != protowire.VarintType {
			if n = protowire.ConsumeFieldValue(num, typ, b); n < 0 {
				return 0, 0, errWire
			}
			b = b[n:]
			continue
		}
		v, n := protowire.ConsumeVarint(b)
		if n < 0 {
			return 0, 0, errWire
		}
		b = b[n:]
		switch num {
		case progressWorker:
			worker = int(v)
		case progressDecided:
			decided = v
		}
	}
	return worker, decided, nil
}

// fragmentSlab decodes an event's fragments into reused messages for the
// reference path: calorimeter fragments of the builder's layout without
// allocating, anything else (a muon payload) with proto.Unmarshal. The
// messages are what proto.Unmarshal makes of the bytes (the builder
// service's decoder, the same code, is checked against it) and are valid
// until the next decode. It is not safe for concurrent use.
type fragmentSlab struct {
	calo  []*caloFragment
	other []*pb.Fragment
	out   []*pb.Fragment
}

// caloFragment is a reused fragment whose payload is its own.
type caloFragment struct {
	f    pb.Fragment
	one  pb.Fragment_Calo
	calo pb.CaloPayload
}

func (s *fragmentSlab) decode(frags [][]byte) ([]*pb.Fragment, error) {
	s.out = s.out[:0]
	nc, no := 0, 0
	for _, raw := range frags {
		if nc == len(s.calo) {
			c := &caloFragment{}
			c.one.Calo = &c.calo
			s.calo = append(s.calo, c)
		}
		if c := s.calo[nc]; c.fast(raw) {
			s.out = append(s.out, &c.f)
			nc++
			continue
		}
		if no == len(s.other) {
			s.other = append(s.other, &pb.Fragment{})
		}
		f := s.other[no]
		no++
		if err := proto.Unmarshal(raw, f); err != nil {
			return nil, err
		}
		s.out = append(s.out, f)
	}
	return s.out, nil
}

// fast decodes raw if it has only one-byte tags, the known varint fields
// and at most one calorimeter payload; it reports false otherwise, leaving
// c in an unspecified state.
func (c *caloFragment) fast(raw []byte) bool {
	f := &c.f
	f.SourceId, f.Run, f.Orbit, f.Bcid, f.TimestampNs, f.Status, f.Checksum = 0, 0, 0, 0, 0, 0, 0
	f.Payload = nil
	c.calo.Towers, c.calo.EtCounts = c.calo.Towers[:0], c.calo.EtCounts[:0]
	for len(raw) > 0 {
		tag := raw[0]
		if tag >= 0x80 {
			return false
		}
		raw = raw[1:]
		num, typ := protowire.Number(tag>>3), protowire.Type(tag&7)
		if num == fragCalo {
			if typ != protowire.BytesType || f.Payload != nil {
				return false
			}
			payload, n := protowire.ConsumeBytes(raw)
			if n < 0 {
				return false
			}
			raw = raw[n:]
			towers, counts, ok := pb.SplitCalo(payload)
			if !ok {
				return false
			}
			if c.calo.Towers, ok = appendPacked(c.calo.Towers, towers); !ok {
				return false
			}
			if c.calo.EtCounts, ok = appendPacked(c.calo.EtCounts, counts); !ok {
				return false
			}
			f.Payload = &c.one
			continue
		}
		if typ != protowire.VarintType {
			return false
		}
		v, n := protowire.ConsumeVarint(raw)
		if n < 0 {
			return false
		}
		raw = raw[n:]
		if !pb.SetFragmentVarint(f, num, v) {
			return false
		}
	}
	return true
}
