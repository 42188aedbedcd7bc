package builder

import (
	"encoding/binary"
	"slices"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// FuzzAdd drives a builder with arbitrary fragment field values and calls.
// The first 4 bytes choose the configuration, then every 16 bytes make one
// call. After every call the accounting must be conserved and the window
// bound hold; across the whole run no crossing may be emitted twice and
// every event must list its fragments and missing sources in order.
func FuzzAdd(f *testing.F) {
	f.Add([]byte{0, 4, 0, 3, 1, 1, 0, 0, 10, 0, 0, 0, 0, 0, 1, 0, 1, 0, 0, 0})
	f.Add([]byte{1, 1, 1, 1, 0, 2, 0, 0, 0, 5, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 3, 0, 0, 0, 5, 0, 0, 0, 0, 0, 200, 0, 0, 0, 0, 2})
	f.Add([]byte{2, 2, 0, 0, 0, 1, 0, 255, 255, 255, 255, 0, 0, 0, 0, 0, 0, 0, 0, 9, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3})
	seed := []byte{0, 8, 0, 7}
	for k := range 40 {
		for src := 1; src <= 4; src++ {
			if (k+src)%5 == 0 {
				continue
			}
			rec := make([]byte, 16)
			rec[0] = 0
			rec[1] = byte(src)
			binary.LittleEndian.PutUint16(rec[4:], uint16(k*3))
			rec[11] = 1 // stamp with the nominal time
			binary.LittleEndian.PutUint16(rec[12:], uint16(k*40))
			seed = append(seed, rec...)
		}
	}
	f.Add(seed)

	f.Fuzz(fuzzAdd)
}

func fuzzAdd(t *testing.T, data []byte) {
	if len(data) < 4 {
		return
	}
	cfg := Config{
		Run:       uint32(data[0] & 1),
		Sources:   []uint32{1, 2, 3, 4},
		Mode:      Mode(data[0] >> 1 & 1),
		WhenFull:  Policy(data[0] >> 2 & 1),
		Window:    1 + int(data[1]&15),
		Lateness:  int64(data[2]) * 25,
		DeadAfter: 1 + int64(data[3])*50,
	}
	window := cfg.Window
	seen := map[uint64]bool{}
	b, err := New(cfg, func(ev *Event) {
		k := uint64(ev.Orbit)*detector.SlotsPerOrbit + uint64(ev.Bcid)
		if seen[k] {
			t.Fatalf("crossing orbit %d bcid %d emitted twice", ev.Orbit, ev.Bcid)
		}
		seen[k] = true
		if len(ev.Fragments)+len(ev.Missing) != 4 || len(ev.Fragments) == 0 {
			t.Fatalf("event with %d fragments and missing %v", len(ev.Fragments), ev.Missing)
		}
		if !slices.IsSortedFunc(ev.Fragments, func(a, b *pb.Fragment) int { return int(a.SourceId) - int(b.SourceId) }) || !slices.IsSorted(ev.Missing) {
			t.Fatalf("event out of order: missing %v", ev.Missing)
		}
		if (len(ev.Missing) > 0) != (ev.Flags&incompleteFlag != 0) {
			t.Fatalf("flags %b with missing %v", ev.Flags, ev.Missing)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	clk := detector.DefaultClock()
	now := int64(0)
	for data = data[4:]; len(data) >= 16; data = data[16:] {
		r := data[:16]
		now += int64(binary.LittleEndian.Uint16(r[12:]))
		switch r[0] % 8 {
		case 6:
			b.Advance(now)
		case 7:
			b.Flush()
		default:
			orbit := uint64(binary.LittleEndian.Uint16(r[2:]))
			if r[0]&0x80 != 0 {
				orbit = binary.LittleEndian.Uint64(r[2:]) // anything at all
			}
			bcid := uint32(binary.LittleEndian.Uint16(r[4:]))
			ts := int64(int16(binary.LittleEndian.Uint16(r[6:])))
			switch r[11] % 4 {
			case 1:
				ts += clk.Nominal(orbit, bcid) // near the nominal time
			case 2:
				ts = int64(binary.LittleEndian.Uint64(r[2:])) // anything at all
			}
			fr := &pb.Fragment{SourceId: uint32(r[1] % 6), Run: uint32(r[8] & 1), Orbit: orbit, Bcid: bcid, TimestampNs: ts, Status: uint32(r[9])}
			if r[10]&1 == 0 {
				fr.Payload = &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{uint32(r[14])}, EtCounts: []uint32{uint32(r[15])}}}
			}
			if r[10]&2 == 0 {
				fr.Seal()
			}
			before := b.Stats()
			err := b.Add(fr, now, int64(r[15]))
			if err != nil && err.Error() == "" {
				t.Fatal("empty error message")
			}
			after := b.Stats()
			if refused := after.WindowFullRefusals - before.WindowFullRefusals; refused > 1 || (refused == 1) == (after.Received == before.Received+1) {
				t.Fatalf("a refused fragment must not be received and vice versa: %+v -> %+v", before, after)
			}
		}
		if s := b.Stats(); !s.Balanced() || s.Open > window || s.Waiting > s.Open {
			t.Fatalf("after %v: %+v", r, s)
		}
	}
	checkBalanced(t, b, window)
}
