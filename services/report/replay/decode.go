package replay

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sync"

	"google.golang.org/protobuf/encoding/protowire"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// errBadBatch is wrapped by every batch decoding error.
var errBadBatch = errors.New("replay: fragment batch does not decode")

// slot is one reusable fragment with the payload values its oneof points
// to, so that decoding into it allocates nothing once its slices have
// grown.
type slot struct {
	f     pb.Fragment
	calo  pb.Fragment_Calo
	caloP pb.CaloPayload
	muon  pb.Fragment_Muon
	muonP pb.MuonPayload
	hits  []pb.MuonHit
	// fused is set when the fragment was decoded in one pass
	// (fuser.fuseFields: a calorimeter payload, or an empty muon one): f then
	// has a nil Payload, and towers holds the towers fill makes of it.
	fused  bool
	towers []towerWord
	// header is set when only the header fields and the checksum were
	// read (a lane's view of another lane's fragment).
	header bool
}

// fragmentPool hands out reusable fragments. It is safe for concurrent
// use (a generator's feeder and workers share one); each lane has one of
// its own, which its lock costs little.
type fragmentPool struct {
	mu    sync.Mutex
	free  []*slot
	index map[*pb.Fragment]*slot
}

func newFragmentPool() *fragmentPool {
	return &fragmentPool{index: make(map[*pb.Fragment]*slot)}
}

// take appends n free slots to dst, growing the pool as needed.
func (p *fragmentPool) take(dst []*slot, n int) []*slot {
	p.mu.Lock()
	defer p.mu.Unlock()
	for len(p.free) < n {
		p.grow()
	}
	k := len(p.free) - n
	dst = append(dst, p.free[k:]...)
	p.free = p.free[:k]
	return dst
}

// grow adds a block of slots; p.mu is held. Blocks keep the pool at few
// allocations however large the builder's window.
func (p *fragmentPool) grow() {
	block := make([]slot, 256)
	for i := range block {
		s := &block[i]
		s.calo.Calo = &s.caloP
		s.muon.Muon = &s.muonP
		// No room for towers up front: a stream's calorimeter slots fill
		// towers (fuser.fuseFields) and leave the arrays empty; each slot's
		// storage grows to what it is given.
		p.index[&s.f] = s
		p.free = append(p.free, s)
	}
}

// put returns the fragment f of a slot to the pool.
func (p *fragmentPool) put(f *pb.Fragment) {
	p.mu.Lock()
	if s, ok := p.index[f]; ok {
		p.free = append(p.free, s)
	}
	p.mu.Unlock()
}

// putAll returns the fragments of slots to the pool under one lock.
func (p *fragmentPool) putAll(fs []*pb.Fragment) {
	if len(fs) == 0 {
		return
	}
	p.mu.Lock()
	for _, f := range fs {
		if s, ok := p.index[f]; ok {
			p.free = append(p.free, s)
		}
	}
	p.mu.Unlock()
}

// slotsOf appends to dst the slots of fragments fs under one lock. Every
// fragment must have come from p: it panics otherwise, as that would lose
// the fragment's content.
func (p *fragmentPool) slotsOf(dst []*slot, fs []*pb.Fragment) []*slot {
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, f := range fs {
		s, ok := p.index[f]
		if !ok {
			panic("replay: fragment not from the pool")
		}
		dst = append(dst, s)
	}
	return dst
}

// putSlots returns slots to the pool under one lock.
func (p *fragmentPool) putSlots(ss []*slot) {
	if len(ss) == 0 {
		return
	}
	p.mu.Lock()
	p.free = append(p.free, ss...)
	p.mu.Unlock()
}

// cache returns a slotCache of p.
func (p *fragmentPool) cache() *slotCache { return &slotCache{pool: p} }

// slotCache takes slots from its pool a block at a time, so that its
// goroutine locks the pool once per block rather than once per fragment.
// It is used by one goroutine.
type slotCache struct {
	pool *fragmentPool
	free []*slot
}

const cacheBlock = 128

func (c *slotCache) get() *slot {
	if len(c.free) == 0 {
		c.free = c.pool.take(c.free, cacheBlock)
	}
	n := len(c.free) - 1
	s := c.free[n]
	c.free = c.free[:n]
	s.fused, s.header = false, false
	return s
}

// put returns f, taken through c, to the pool.
func (c *slotCache) put(f *pb.Fragment) { c.pool.put(f) }

// batchInfo is what decodeBatchFunc reads besides the fragments.
type batchInfo struct {
	source   uint32
	run      uint32
	endOfRun bool
}

// decodeBatchFunc decodes a FragmentBatch protobuf (proto/bunchsieve/v1/
// fragment.proto) into fragments from the pool, appended to out, each
// Fragment message decoded into its slot by decode. It reads what
// proto.Unmarshal reads, skips unknown fields and fields of an unexpected
// wire type (as protobuf decoders do), and lets a later occurrence of a
// scalar field win; it differs only in dropping unknown fields instead of
// keeping them. On error the fragments taken so far are returned to the
// pool and out is returned unchanged.
func decodeBatchFunc(data []byte, pool *slotCache, out []*pb.Fragment, decode func([]byte, *slot) error) ([]*pb.Fragment, batchInfo, error) {
	var info batchInfo
	start := len(out)
	fail := func(what string) ([]*pb.Fragment, batchInfo, error) {
		for _, f := range out[start:] {
			pool.put(f)
		}
		return out[:start], batchInfo{}, fmt.Errorf("%w: %s", errBadBatch, what)
	}
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return fail("bad tag")
		}
		data = data[n:]
		switch {
		case typ == protowire.VarintType && (num == 1 || num == 2 || num == 3 || num == 4 || num == 6):
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return fail("bad varint")
			}
			data = data[n:]
			switch num {
			case 1:
				info.source = uint32(v)
			case 2:
				info.run = uint32(v)
			case 6:
				info.endOfRun = v != 0
			}
		case typ == protowire.BytesType && num == 5:
			b, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return fail("bad fragment length")
			}
			data = data[n:]
			s := pool.get()
			if err := decode(b, s); err != nil {
				pool.put(&s.f)
				return fail(err.Error())
			}
			out = append(out, &s.f)
		default:
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return fail(fmt.Sprintf("bad field %d", num))
			}
			data = data[n:]
		}
	}
	return out, info, nil
}

// decodeFragment decodes one Fragment message into s.
func decodeFragment(data []byte, s *slot) error {
	f := &s.f
	f.SourceId, f.Run, f.Orbit, f.Bcid, f.TimestampNs, f.Status, f.Checksum = 0, 0, 0, 0, 0, 0, 0
	f.Payload = nil
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return errors.New("bad tag in fragment")
		}
		data = data[n:]
		switch {
		case typ == protowire.VarintType && num >= 1 && num <= 6 || typ == protowire.VarintType && num == 9:
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return errors.New("bad varint in fragment")
			}
			data = data[n:]
			pb.SetFragmentVarint(f, num, v)
		case typ == protowire.BytesType && num == 7:
			b, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return errors.New("bad calorimeter payload length")
			}
			data = data[n:]
			// A oneof member met again merges into the one already set,
			// as protobuf decoders do; a different member replaces it.
			if f.Payload != &s.calo {
				s.caloP.Towers, s.caloP.EtCounts = s.caloP.Towers[:0], s.caloP.EtCounts[:0]
				f.Payload = &s.calo
			}
			if err := decodeCalo(b, &s.caloP); err != nil {
				return err
			}
		case typ == protowire.BytesType && num == 8:
			b, n := protowire.ConsumeBytes(data)
			if n < 0 {
				return errors.New("bad muon payload length")
			}
			data = data[n:]
			if f.Payload != &s.muon {
				s.muonP.Hits = s.muonP.Hits[:0]
				s.hits = s.hits[:0]
				f.Payload = &s.muon
			}
			if err := decodeMuon(b, s); err != nil {
				return err
			}
		default:
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return fmt.Errorf("bad field %d in fragment", num)
			}
			data = data[n:]
		}
	}
	return nil
}

// decodeCalo appends the towers and counts of a CaloPayload, packed or
// not.
func decodeCalo(data []byte, c *pb.CaloPayload) error {
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return errors.New("bad tag in calorimeter payload")
		}
		data = data[n:]
		if num != 1 && num != 2 || typ != protowire.BytesType && typ != protowire.VarintType {
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return fmt.Errorf("bad field %d in calorimeter payload", num)
			}
			data = data[n:]
			continue
		}
		dst := &c.Towers
		if num == 2 {
			dst = &c.EtCounts
		}
		if typ == protowire.VarintType {
			v, n := protowire.ConsumeVarint(data)
			if n < 0 {
				return errors.New("bad varint in calorimeter payload")
			}
			data = data[n:]
			*dst = append(*dst, uint32(v))
			continue
		}
		b, n := protowire.ConsumeBytes(data)
		if n < 0 {
			return errors.New("bad packed list in calorimeter payload")
		}
		data = data[n:]
		vals, err := appendPacked(*dst, b)
		if err != nil {
			return err
		}
		*dst = vals
	}
	return nil
}

// appendPacked appends the varints of a packed list to vals, truncated to
// 32 bits as protobuf decodes uint32. It sizes vals once (every varint
// ends in the one byte with its top bit clear) and decodes one- and
// two-byte varints, nearly all of a tower list, inline.
func appendPacked(vals []uint32, b []byte) ([]uint32, error) {
	n := countTerminators(b)
	base := len(vals)
	vals = slices.Grow(vals, n)[:base+n]
	out := vals[base:]
	j := 0
	for i := 0; i < len(b); j++ {
		c := b[i]
		if c < 0x80 {
			out[j] = uint32(c)
			i++
			continue
		}
		if i+1 < len(b) && b[i+1] < 0x80 {
			out[j] = uint32(c&0x7f) | uint32(b[i+1])<<7
			i += 2
			continue
		}
		v, k := protowire.ConsumeVarint(b[i:])
		if k < 0 {
			return vals[:base], errors.New("bad varint in packed calorimeter list")
		}
		out[j] = uint32(v)
		i += k
	}
	return vals, nil
}

// countTerminators counts the bytes of b below 0x80, eight at a time.
func countTerminators(b []byte) int {
	n := 0
	for len(b) >= 8 {
		w := binary.LittleEndian.Uint64(b)
		n += bits.OnesCount64(^w & 0x8080808080808080)
		b = b[8:]
	}
	for _, c := range b {
		if c < 0x80 {
			n++
		}
	}
	return n
}

// decodeMuon appends the hits of a MuonPayload to s.
func decodeMuon(data []byte, s *slot) error {
	for len(data) > 0 {
		num, typ, n := pb.ConsumeTag(data)
		if n < 0 {
			return errors.New("bad tag in muon payload")
		}
		data = data[n:]
		if num != 1 || typ != protowire.BytesType {
			n := protowire.ConsumeFieldValue(num, typ, data)
			if n < 0 {
				return fmt.Errorf("bad field %d in muon payload", num)
			}
			data = data[n:]
			continue
		}
		b, n := protowire.ConsumeBytes(data)
		if n < 0 {
			return errors.New("bad muon hit length")
		}
		data = data[n:]
		var h pb.MuonHit
		for len(b) > 0 {
			hn, ht, k := pb.ConsumeTag(b)
			if k < 0 {
				return errors.New("bad tag in muon hit")
			}
			b = b[k:]
			switch {
			case hn == 1 && ht == protowire.VarintType:
				v, k := protowire.ConsumeVarint(b)
				if k < 0 {
					return errors.New("bad station in muon hit")
				}
				b = b[k:]
				h.Station = uint32(v)
			case hn >= 2 && hn <= 4 && ht == protowire.Fixed32Type:
				v, k := protowire.ConsumeFixed32(b)
				if k < 0 {
					return errors.New("bad coordinate in muon hit")
				}
				b = b[k:]
				x := math.Float32frombits(v)
				switch hn {
				case 2:
					h.XMm = x
				case 3:
					h.YMm = x
				case 4:
					h.ZMm = x
				}
			default:
				k := protowire.ConsumeFieldValue(hn, ht, b)
				if k < 0 {
					return fmt.Errorf("bad field %d in muon hit", hn)
				}
				b = b[k:]
			}
		}
		s.hits = append(s.hits, pb.MuonHit{Station: h.Station, XMm: h.XMm, YMm: h.YMm, ZMm: h.ZMm})
	}
	// Hits are values of the slot; the pointers are taken once the list
	// has stopped growing, so a reallocation cannot leave them stale.
	s.muonP.Hits = s.muonP.Hits[:0]
	for i := range s.hits {
		s.muonP.Hits = append(s.muonP.Hits, &s.hits[i])
	}
	return nil
}
