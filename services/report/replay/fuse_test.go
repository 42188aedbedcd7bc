package replay

import (
	"errors"
	"io"
	"math/rand/v2"
	"slices"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// recordedBatches records crossings of the physics generator (forced
// Z -> mu mu, for muon hits), with the muon sources the readout has, through the readout emulator with some
// fragments corrupted after sealing, and returns the FragmentBatch bytes
// of the stream.
func recordedBatches(t *testing.T, crossings uint64) [][]byte {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 8, detector.PhysicsConfig{Mu: 40, Force: "z-mumu", LibraryEvents: 60})
	if err != nil {
		t.Fatal(err)
	}
	path := recordReadout(t, gen, part, crossings, 8, emulator.Fault{Corrupt: 0.05})
	r, err := recording.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	var out [][]byte
	for {
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, append([]byte(nil), b.Data...))
	}
}

// gridTowersOf returns the towers of ev that fillSlots may give in
// either form, GridTowers or CountTowers, as the GridTowers they stand
// for (the definition in the trigger.CountTowers comment), in the order
// the selection sees them.
func gridTowersOf(ev *trigger.Event) []trigger.GridTower {
	return ev.Counted.AppendGridTowers(slices.Clone(ev.GridTowers))
}

// equalGrid compares grid towers element by element, so that a nil and
// an empty list are equal.
func equalGrid(a, b []trigger.GridTower) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// fuseCounts counts what checkFused saw.
type fuseCounts struct {
	fragments, fused, damaged, fusedDamaged int
}

func (c *fuseCounts) add(d fuseCounts) {
	c.fragments += d.fragments
	c.fused += d.fused
	c.damaged += d.damaged
	c.fusedDamaged += d.fusedDamaged
}

// checkFused decodes one batch with a fuser and compares, fragment by
// fragment, with protobuf-go's proto.Unmarshal followed by
// selector.FillEvent and Fragment.Intact (the selection service's
// decoder and the wire format's checksum), and with the replay's own
// reference path (decodeBatch, Checksummer.Sum, towerTable.fill). It
// returns the fragments decoded and what it counted of them.
func checkFused(t *testing.T, name string, data []byte, fz *fuser, cache *slotCache) (frags []*pb.Fragment, n fuseCounts) {
	t.Helper()
	g := detector.Lantern()
	ref, _, refErr := decodeBatch(data, cache, nil)
	defer cache.pool.putAll(ref)
	frags, intact, err := fz.decodeBatch(data, cache, nil, nil)
	if (err == nil) != (refErr == nil) {
		t.Fatalf("%s: fused decoding says %v, the reference path %v", name, err, refErr)
	}
	if err != nil {
		if len(frags) != 0 || len(intact) != 0 {
			t.Fatalf("%s: a batch that does not decode left %d fragments and %d verdicts", name, len(frags), len(intact))
		}
		return nil, n
	}
	var want pb.FragmentBatch
	protoOK := proto.Unmarshal(data, &want) == nil
	if len(frags) != len(ref) || len(intact) != len(frags) || protoOK && len(want.Fragments) != len(frags) {
		t.Fatalf("%s: %d fragments and %d verdicts, the reference path %d fragments", name, len(frags), len(intact), len(ref))
	}
	slots := cache.pool.slotsOf(nil, frags)
	var sum pb.Checksummer
	var got, exp trigger.Event
	for i, f := range frags {
		s, r := slots[i], ref[i]
		if f.SourceId != r.SourceId || f.Run != r.Run || f.Orbit != r.Orbit || f.Bcid != r.Bcid ||
			f.TimestampNs != r.TimestampNs || f.Status != r.Status || f.Checksum != r.Checksum {
			t.Fatalf("%s, fragment %d: header %v, the reference path %v", name, i, f, r)
		}
		if intact[i] != (sum.Sum(r) == r.Checksum) {
			t.Fatalf("%s, fragment %d: intact %v, Checksummer.Sum says otherwise", name, i, intact[i])
		}
		if protoOK && intact[i] != want.Fragments[i].Intact() {
			t.Fatalf("%s, fragment %d: intact %v, Fragment.Intact %v", name, i, intact[i], !intact[i])
		}
		n.fragments++
		if s.fused {
			n.fused++
		} else if !proto.Equal(f, r) {
			t.Fatalf("%s, fragment %d: handed over, but decodes to %v, the reference path to %v", name, i, f, r)
		}
		if !intact[i] {
			n.damaged++
			if s.fused {
				n.fusedDamaged++
			}
		}
		tables.fillSlots(slots[i:i+1], 1, &got)
		if protoOK {
			selector.FillEvent(g, want.Fragments[i:i+1], 1, &exp)
		} else {
			tables.fill(ref[i:i+1], 1, &exp)
		}
		if !equalGrid(gridTowersOf(&got), exp.GridTowers) || len(got.MuonHits) != len(exp.MuonHits) {
			t.Fatalf("%s, fragment %d (fused %v): %d grid towers and %d muon hits, the reference %d and %d",
				name, i, s.fused, len(gridTowersOf(&got)), len(got.MuonHits), len(exp.GridTowers), len(exp.MuonHits))
		}
	}
	return frags, n
}

// tables is the tower table of the built-in geometry, shared by the
// tests: it is immutable.
var tables = newTowerTable(detector.Lantern())

// The fused pass gives, on recorded physics batches (calorimeter and
// muon sources, some fragments corrupted after sealing by the readout
// emulator) and on the same batches with bytes flipped, exactly the
// towers of selector.FillEvent and the checksum verdict of
// Fragment.Intact; and whole events of fused and handed-over fragments
// fill as FillEvent fills them.
func TestFusedMatchesFillEventAndIntact(t *testing.T) {
	batches := recordedBatches(t, 96)
	fz := newFuser(tables)
	cache := newFragmentPool().cache()
	var seen fuseCounts
	var all []*pb.Fragment
	var refs []*pb.Fragment
	for i, data := range batches {
		frags, n := checkFused(t, "recorded batch", data, fz, cache)
		seen.add(n)
		if i%7 == 0 {
			// Kept for the event below, with protobuf's decoding.
			var b pb.FragmentBatch
			if err := proto.Unmarshal(data, &b); err != nil {
				t.Fatal(err)
			}
			all, refs = append(all, frags...), append(refs, b.Fragments...)
		} else {
			cache.pool.putAll(frags)
		}
	}
	// The emulator corrupts calorimeter fragments in a count, so the
	// fused pass must see them; muon fragments are handed over.
	if seen.fusedDamaged == 0 || seen.fused == seen.fragments || seen.fused < seen.fragments/2 {
		t.Fatalf("recorded batches: %+v: the sample does not exercise the fused pass, damage and hand-over", seen)
	}
	var got, want trigger.Event
	tables.fillSlots(cache.pool.slotsOf(nil, all), 3, &got)
	selector.FillEvent(detector.Lantern(), refs, 3, &want)
	if len(want.GridTowers) == 0 || len(want.MuonHits) == 0 || !equalGrid(gridTowersOf(&got), want.GridTowers) ||
		len(got.MuonHits) != len(want.MuonHits) || got.LumiSlice != want.LumiSlice {
		t.Fatalf("mixed event: %d towers and %d hits, FillEvent %d and %d", len(gridTowersOf(&got)), len(got.MuonHits), len(want.GridTowers), len(want.MuonHits))
	}
	for i := range got.MuonHits {
		if got.MuonHits[i] != want.MuonHits[i] {
			t.Fatalf("mixed event, muon hit %d: %+v, FillEvent %+v", i, got.MuonHits[i], want.MuonHits[i])
		}
	}
	cache.pool.putAll(all)

	// Damage as a bad link or a bad disk would do it: one to three bytes
	// flipped anywhere in a batch.
	r := rand.New(rand.NewPCG(5, 6))
	var flipped fuseCounts
	for range 3000 {
		data := append([]byte(nil), batches[r.IntN(len(batches))]...)
		for range 1 + r.IntN(3) {
			data[r.IntN(len(data))] ^= byte(1 << r.IntN(8))
		}
		frags, n := checkFused(t, "damaged batch", data, fz, cache)
		flipped.add(n)
		cache.pool.putAll(frags)
	}
	if flipped.fusedDamaged == 0 || flipped.fused == flipped.fragments {
		t.Fatalf("flipped batches: %+v: no damage reached the fused pass", flipped)
	}
}

// caloFragment encodes a fragment whose calorimeter payload is body, with
// the header fields and checksum of h, in the order proto.Marshal writes
// them (the oneof last).
func caloFragment(h *pb.Fragment, body []byte) []byte {
	return protowire.AppendBytes(protowire.AppendTag(header(h), 7, protowire.BytesType), body)
}

// header encodes the fields of h before the payload, omitting zeros as
// proto.Marshal does.
func header(h *pb.Fragment) []byte {
	var b []byte
	for _, v := range []struct {
		num protowire.Number
		v   uint64
	}{{1, uint64(h.SourceId)}, {2, uint64(h.Run)}, {3, h.Orbit}, {4, uint64(h.Bcid)}, {5, uint64(h.TimestampNs)}, {6, uint64(h.Status)}} {
		if v.v != 0 {
			b = protowire.AppendVarint(protowire.AppendTag(b, v.num, protowire.VarintType), v.v)
		}
	}
	if h.Checksum != 0 {
		b = protowire.AppendVarint(protowire.AppendTag(b, 9, protowire.VarintType), uint64(h.Checksum))
	}
	return b
}

func packed(num protowire.Number, vals []uint32) []byte {
	var p []byte
	for _, v := range vals {
		p = protowire.AppendVarint(p, uint64(v))
	}
	return protowire.AppendBytes(protowire.AppendTag(nil, num, protowire.BytesType), p)
}

func unpacked(num protowire.Number, vals []uint32) []byte {
	var b []byte
	for _, v := range vals {
		b = protowire.AppendVarint(protowire.AppendTag(b, num, protowire.VarintType), uint64(v))
	}
	return b
}

func cat(parts ...[]byte) []byte {
	var b []byte
	for _, p := range parts {
		b = append(b, p...)
	}
	return b
}

// muonHit is the encoding of one MuonHit (station 2, x 1 mm).
var muonHit = protowire.AppendBytes([]byte{1<<3 | 2}, []byte{1 << 3, 2, 2<<3 | 5, 0, 0, 0x80, 0x3f})

// The fused pass takes the canonical layout, in whatever order the
// fragment's own fields come, and hands every other layout to the
// reference path; either way the fragment decodes as the reference path
// decodes it.
func TestFuseLayouts(t *testing.T) {
	towers := []uint32{5, 300, 20000, 9, 1 << 31, 70}
	counts := []uint32{1, 0, 7, 128, 1 << 20, 4095} // 1 << 20 on a tower off the table
	h := &pb.Fragment{SourceId: 3, Run: 1, Orbit: 1 << 40, Bcid: 17, TimestampNs: 123456789, Status: 1}
	var sum pb.Checksummer
	canonical := cat(packed(1, towers), packed(2, counts))
	ref := &pb.Fragment{SourceId: h.SourceId, Run: h.Run, Orbit: h.Orbit, Bcid: h.Bcid, TimestampNs: h.TimestampNs, Status: h.Status,
		Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: towers, EtCounts: counts}}}
	h.Checksum = sum.Sum(ref)
	sealed := caloFragment(h, canonical)
	if want, _ := proto.Marshal(&pb.Fragment{SourceId: h.SourceId, Run: h.Run, Orbit: h.Orbit, Bcid: h.Bcid, TimestampNs: h.TimestampNs,
		Status: h.Status, Checksum: h.Checksum, Payload: ref.Payload}); string(want) != string(sealed) {
		t.Fatal("caloFragment does not write the layout proto.Marshal writes")
	}
	// Runs long enough for the four-at-a-time path: two-byte towers
	// (128..16383) and one-byte counts, with zero counts, indices past
	// the table (10,240 cells) and a one- or two-byte value breaking
	// some runs.
	var runT, runC []uint32
	for i := range 61 {
		tw, ct := uint32(128+131*i), uint32(1+i%127)
		switch i % 9 {
		case 2:
			ct = 0
		case 5:
			tw = 10240 + uint32(i)
		case 7:
			if i%2 == 1 {
				tw = 100
			} else {
				ct = 200
			}
		}
		runT, runC = append(runT, tw), append(runC, ct)
	}
	cases := []struct {
		name  string
		data  []byte
		fused bool
	}{
		{"canonical", sealed, true},
		{"long runs", caloFragment(h, cat(packed(1, runT), packed(2, runC))), true},
		{"long runs, counts short", caloFragment(h, cat(packed(1, runT), packed(2, runC[:45]))), true},
		{"towers only", caloFragment(h, packed(1, towers)), true},
		{"counts only", caloFragment(h, packed(2, counts)), true},
		{"more counts than towers", caloFragment(h, cat(packed(1, towers[:2]), packed(2, counts))), true},
		{"more towers than counts", caloFragment(h, cat(packed(1, towers), packed(2, counts[:3]))), true},
		{"empty payload", caloFragment(h, nil), true},
		{"count beyond 16 bits", caloFragment(h, cat(packed(1, []uint32{7}), packed(2, []uint32{1 << 16}))), false},
		{"count of 16 bits", caloFragment(h, cat(packed(1, []uint32{7}), packed(2, []uint32{1<<16 - 1}))), true},
		{"header after the payload", cat(protowire.AppendBytes([]byte{7<<3 | 2}, canonical), header(h)), true},
		{"scalar given twice", cat(sealed, []byte{1 << 3, 9}), true},
		{"no payload", cat([]byte{1 << 3, 3, 9 << 3, 1}), false},
		{"unpacked towers", caloFragment(h, cat(unpacked(1, towers), packed(2, counts))), false},
		{"unpacked counts", caloFragment(h, cat(packed(1, towers), unpacked(2, counts))), false},
		{"counts before towers", caloFragment(h, cat(packed(2, counts), packed(1, towers))), false},
		{"towers split", caloFragment(h, cat(packed(1, towers[:2]), packed(2, counts), packed(1, towers[2:]))), false},
		{"unknown payload field", caloFragment(h, cat(canonical, protowire.AppendVarint([]byte{3 << 3}, 1))), false},
		{"unknown fragment field", cat(sealed, protowire.AppendVarint(protowire.AppendTag(nil, 20, protowire.VarintType), 1)), false},
		{"payload given twice", cat(sealed, protowire.AppendBytes([]byte{7<<3 | 2}, packed(1, towers))), false},
		{"empty muon payload", cat([]byte{1 << 3, 3}, protowire.AppendBytes([]byte{8<<3 | 2}, nil)), true},
		{"muon payload with a hit", cat([]byte{1 << 3, 3}, protowire.AppendBytes([]byte{8<<3 | 2}, muonHit)), false},
		{"empty muon payload, then a calorimeter one", cat(protowire.AppendBytes([]byte{8<<3 | 2}, nil), sealed), false},
		{"header of the wrong type", cat(sealed, protowire.AppendBytes([]byte{2<<3 | 2}, nil)), false},
		{"truncated varint", caloFragment(h, cat(packed(1, towers), []byte{2<<3 | 2, 2, 0x80, 0x80})), false},
		{"overlong varint", caloFragment(h, cat([]byte{1<<3 | 2, 10}, []byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x7f})), false},
		{"ten-byte varint", caloFragment(h, cat([]byte{1<<3 | 2, 10}, []byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01})), true},
	}
	fz := newFuser(tables)
	cache := newFragmentPool().cache()
	for _, c := range cases {
		s := cache.get()
		_, fused := fz.fuse(c.data, s)
		cache.put(&s.f)
		if fused != c.fused {
			t.Errorf("%s: fused %v, want %v", c.name, fused, c.fused)
		}
		checkFuzzCase(t, fz, cache, c.data)
	}
}

// checkFuzzCase checks fuser.decode on one Fragment encoding against the
// reference path: decodeFragment, Checksummer.Sum and towerTable.fill,
// and, where the fused pass took it, protobuf-go's decoding with
// selector.FillEvent.
func checkFuzzCase(t *testing.T, fz *fuser, cache *slotCache, data []byte) {
	t.Helper()
	s, r := cache.get(), cache.get()
	defer cache.put(&s.f)
	defer cache.put(&r.f)
	intact, err := fz.decode(data, s)
	refErr := decodeFragment(data, r)
	if (err == nil) != (refErr == nil) {
		t.Fatalf("decode says %v, the reference path %v", err, refErr)
	}
	if err != nil {
		return
	}
	var sum pb.Checksummer
	want := sum.Sum(&r.f)
	if intact != (want == r.f.Checksum) {
		t.Fatalf("intact %v, Checksummer.Sum %#x against checksum %#x", intact, want, r.f.Checksum)
	}
	var got, exp trigger.Event
	tables.fillSlots([]*slot{s}, 1, &got)
	tables.fill([]*pb.Fragment{&r.f}, 1, &exp)
	if !equalGrid(gridTowersOf(&got), exp.GridTowers) || len(got.MuonHits) != len(exp.MuonHits) {
		t.Fatalf("fused %v: %d towers, the reference path %d", s.fused, len(gridTowersOf(&got)), len(exp.GridTowers))
	}
	f := &s.f
	if f.SourceId != r.f.SourceId || f.Run != r.f.Run || f.Orbit != r.f.Orbit || f.Bcid != r.f.Bcid ||
		f.TimestampNs != r.f.TimestampNs || f.Status != r.f.Status || f.Checksum != r.f.Checksum {
		t.Fatalf("header %v, the reference path %v", f, &r.f)
	}
	if !s.fused {
		if !proto.Equal(f, &r.f) {
			t.Fatalf("handed over, decodes to %v, the reference path to %v", f, &r.f)
		}
		return
	}
	// What the fused pass takes, protobuf takes too, with the same
	// content.
	crc, _ := fz.fuse(data, s)
	if crc != want {
		t.Fatalf("fused CRC %#x, Checksummer.Sum %#x", crc, want)
	}
	var pf pb.Fragment
	if err := proto.Unmarshal(data, &pf); err != nil {
		t.Fatalf("fused, but protobuf does not decode it: %v", err)
	}
	if (pf.GetCalo() == nil && (pf.GetMuon() == nil || len(pf.GetMuon().Hits) > 0)) || pf.Intact() != intact {
		t.Fatalf("fused, protobuf decodes payload %T, intact %v", pf.Payload, pf.Intact())
	}
	selector.FillEvent(detector.Lantern(), []*pb.Fragment{&pf}, 1, &exp)
	if !equalGrid(gridTowersOf(&got), exp.GridTowers) {
		t.Fatalf("fused: %d towers, FillEvent %d", len(gridTowersOf(&got)), len(exp.GridTowers))
	}
}

// FuzzFusedPayload: on any calorimeter payload bytes, with any header and
// checksum, fuser.decode never panics, and gives what the reference path
// gives, whether it fused the fragment or handed it over.
func FuzzFusedPayload(f *testing.F) {
	r := rand.New(rand.NewPCG(7, 8))
	for range 12 {
		n := r.IntN(120)
		towers, counts := make([]uint32, n), make([]uint32, n)
		for i := range n {
			towers[i], counts[i] = r.Uint32N(12000), r.Uint32N(300)
		}
		f.Add(cat(packed(1, towers), packed(2, counts)), r.Uint64N(1<<30), r.Uint32())
		f.Add(cat(unpacked(1, towers), packed(2, counts)), r.Uint64N(1<<30), r.Uint32())
		f.Add(cat(packed(1, towers), packed(2, counts[:n/2])), r.Uint64N(1<<30), r.Uint32())
	}
	f.Add([]byte{}, uint64(0), uint32(0))
	f.Add([]byte{1<<3 | 2, 3, 0x80, 0x80, 0x80}, uint64(1), uint32(2))
	fz := newFuser(tables)
	cache := newFragmentPool().cache()
	var sum pb.Checksummer
	f.Fuzz(func(t *testing.T, payload []byte, orbit uint64, checksum uint32) {
		h := &pb.Fragment{SourceId: 2, Run: 1, Orbit: orbit, Bcid: uint32(orbit % 3564), TimestampNs: int64(orbit) * 25, Checksum: checksum}
		checkFuzzCase(t, fz, cache, caloFragment(h, payload))
		// The same bytes as a muon payload: only an empty one is fused.
		checkFuzzCase(t, fz, cache, cat(header(h), protowire.AppendBytes([]byte{8<<3 | 2}, payload)))
		// The same payload sealed, so that intact fragments are fuzzed
		// too.
		s := cache.get()
		defer cache.put(&s.f)
		if decodeFragment(caloFragment(h, payload), s) == nil {
			h.Checksum = sum.Sum(&s.f)
			checkFuzzCase(t, fz, cache, caloFragment(h, payload))
		}
	})
}

// decodeBatch is decodeBatch through the fuser, as a lane decodes its
// own fragments: it also appends to intact,
// per fragment, whether its checksum matches its content. On error out
// and intact are returned unchanged.
func (fz *fuser) decodeBatch(data []byte, pool *slotCache, out []*pb.Fragment, intact []bool) ([]*pb.Fragment, []bool, error) {
	start := len(intact)
	out, _, err := decodeBatchFunc(data, pool, out, func(b []byte, s *slot) error {
		ok, err := fz.decode(b, s)
		intact = append(intact, ok)
		return err
	})
	if err != nil {
		intact = intact[:start]
	}
	return out, intact, err
}

// decode decodes one Fragment message into s and reports whether its
// checksum matches its content.
func (fz *fuser) decode(data []byte, s *slot) (intact bool, err error) {
	var hdr [10]uint64
	payload, num, ok := canonicalFields(data, &hdr)
	return fz.decodeFields(data, ok, &hdr, payload, num, s)
}

// fuse is fuseFields for a whole Fragment message; false for a message
// canonicalFields refuses.
func (fz *fuser) fuse(data []byte, s *slot) (uint32, bool) {
	var hdr [10]uint64
	payload, num, ok := canonicalFields(data, &hdr)
	if !ok {
		return 0, false
	}
	return fz.fuseFields(&hdr, payload, num, s)
}
