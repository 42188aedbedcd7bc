package bunchsievev1

import (
	"math/rand/v2"
	"slices"
	"testing"

	"google.golang.org/protobuf/proto"
)

// packedCase draws a calorimeter fragment whose lists exercise every
// branch of SumPacked: runs of two-byte indices with one-byte counts (the
// four-at-a-time path), one-byte and three- to five-byte varints, zero
// counts, indices beyond the table, counts beyond 16 bits, and lists of
// unequal length.
func packedCase(rng *rand.Rand) *Fragment {
	n := []int{0, 1, 3, 4, 5, 8, 9, 31, 64, 200, 1100}[rng.IntN(11)]
	towers, counts := make([]uint32, n), make([]uint32, n)
	for i := range n {
		towers[i], counts[i] = 128+rng.Uint32N(16000), 1+rng.Uint32N(127)
		switch rng.IntN(12) {
		case 0:
			towers[i] = rng.Uint32N(128)
		case 1:
			towers[i] = rng.Uint32()
		case 2:
			counts[i] = 0
		case 3:
			counts[i] = 128 + rng.Uint32N(1<<14)
		case 4:
			counts[i] = 1<<16 + rng.Uint32N(1<<20)
		}
	}
	switch rng.IntN(4) {
	case 0:
		towers = towers[:rng.IntN(n+1)]
	case 1:
		counts = counts[:rng.IntN(n+1)]
	}
	return &Fragment{
		SourceId: rng.Uint32(), Run: rng.Uint32(), Orbit: rng.Uint64(), Bcid: rng.Uint32N(3564),
		TimestampNs: rng.Int64(), Status: rng.Uint32N(4),
		Payload: &Fragment_Calo{Calo: &CaloPayload{Towers: towers, EtCounts: counts}},
	}
}

// SumPacked, reading the packed lists as proto.Marshal (the reference
// encoder, google.golang.org/protobuf) writes them, gives what Sum and the
// byte-by-byte reference give for the decoded fragment, and keeps exactly
// the pairs with a nonzero count and an index below the table's size,
// after the words already given.
func TestSumPackedMatchesSum(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	var c, fused Checksummer
	var words []uint32
	refused := 0
	for i := range 3000 {
		f := packedCase(rng)
		enc, err := proto.Marshal(f.GetCalo())
		if err != nil {
			t.Fatal(err)
		}
		towers, counts, ok := SplitCalo(enc)
		if !ok {
			t.Fatalf("case %d: SplitCalo refuses proto.Marshal's layout", i)
		}
		ncells := []int{0, 1 << 14, 1 << 16}[i%3]
		var want []uint32
		calo := f.GetCalo()
		for k, tw := range calo.Towers {
			if k < len(calo.EtCounts) && calo.EtCounts[k] != 0 && int(tw) < ncells {
				want = append(want, tw|calo.EtCounts[k]<<16)
			}
		}
		// Words are appended after what the slice holds.
		prefix := []uint32{uint32(i), 0xdead}[:i%3]
		want = append(slices.Clone(prefix), want...)
		sum, got, ok := fused.SumPacked(f, towers, counts, ncells, append(words[:0], prefix...))
		// PackedWords is the same pass without the checksum.
		only, okOnly := fused.PackedWords(towers, counts, ncells, slices.Clone(prefix))
		if okOnly != ok || (ok && !slices.Equal(only, got)) {
			t.Fatalf("case %d: PackedWords %x (ok %v), SumPacked %x (ok %v)", i, only, okOnly, got, ok)
		}
		kept16 := true
		for k, tw := range calo.Towers {
			if k < len(calo.EtCounts) && calo.EtCounts[k] > 0xffff && int(tw) < ncells {
				kept16 = false
			}
		}
		if !kept16 {
			// A kept count beyond 16 bits cannot be a word: refused.
			if ok {
				t.Fatalf("case %d: a count beyond 16 bits was kept", i)
			}
			refused++
			continue
		}
		if !ok {
			t.Fatalf("case %d (%d towers, %d counts): refused", i, len(calo.Towers), len(calo.EtCounts))
		}
		if ref := reference(f); sum != c.Sum(f) || sum != ref {
			t.Fatalf("case %d: SumPacked %#x, Sum %#x, reference %#x", i, sum, c.Sum(f), ref)
		}
		if !slices.Equal(got, want) {
			t.Fatalf("case %d: words %x, want %x", i, got, want)
		}
		words = got
	}
	if refused == 0 {
		t.Fatal("no case had a kept count beyond 16 bits")
	}
}

// A list that is not valid packed varints is refused, never summed, by
// SumPacked and PackedWords alike.
func TestSumPackedRefusesBadLists(t *testing.T) {
	var c Checksummer
	f := &Fragment{SourceId: 3}
	for _, lists := range [][2][]byte{
		{{0x80}, {1}},          // a tower varint cut short
		{{1, 2}, {0x81, 0x80}}, // a count varint cut short
		{{1}, {1, 0xff}},       // a surplus count cut short
		{{1, 0xff, 0xff}, {1}}, // a surplus tower cut short
		{{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01}, {1}}, // eleven bytes
	} {
		if _, _, ok := c.SumPacked(f, lists[0], lists[1], 1<<16, nil); ok {
			t.Errorf("lists %x, %x: accepted", lists[0], lists[1])
		}
		if _, ok := c.PackedWords(lists[0], lists[1], 1<<16, nil); ok {
			t.Errorf("lists %x, %x: PackedWords accepted them", lists[0], lists[1])
		}
	}
}

// SplitCalo takes the towers, then the counts, each packed at most once,
// and nothing else.
func TestSplitCaloLayouts(t *testing.T) {
	for _, tc := range []struct {
		p  []byte
		ok bool
	}{
		{nil, true},
		{[]byte{0x0a, 1, 5}, true},              // towers only
		{[]byte{0x12, 1, 5}, true},              // counts only
		{[]byte{0x0a, 1, 5, 0x12, 1, 6}, true},  // both
		{[]byte{0x12, 1, 6, 0x0a, 1, 5}, false}, // counts first
		{[]byte{0x0a, 1, 5, 0x0a, 1, 6}, false}, // towers twice
		{[]byte{0x08, 5}, false},                // an unpacked tower
		{[]byte{0x0a, 3, 5}, false},             // a length beyond the payload
		{[]byte{0x0a, 1, 5, 0x1a, 0}, false},    // an unknown field
	} {
		if _, _, ok := SplitCalo(tc.p); ok != tc.ok {
			t.Errorf("SplitCalo(%x): ok %v, want %v", tc.p, ok, tc.ok)
		}
	}
}
