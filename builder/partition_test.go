package builder

import (
	"encoding/binary"
	"hash/fnv"
	"math/rand/v2"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
)

// The hash is FNV-1a (Fowler, Noll, Vo); the standard library's hash/fnv
// is the reference it must agree with.
func TestFNV1aMatchesStandardLibrary(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range 1000 {
		v := rng.Uint64()
		if i < 10 {
			v = uint64(i)
		}
		h := fnv.New64a()
		var buf [8]byte
		binary.LittleEndian.PutUint64(buf[:], v)
		h.Write(buf[:])
		if got, want := fnv1a64(v), h.Sum64(); got != want {
			t.Fatalf("fnv1a64(%d) = %#x, hash/fnv says %#x", v, got, want)
		}
	}
}

func TestPartitionBalanced(t *testing.T) {
	// Filling patterns: every slot, 50 ns and 100 ns spacing, and trains of
	// 72 filled slots with 8 empty ones between them.
	patterns := map[string]func(int) bool{
		"every slot":   func(int) bool { return true },
		"every second": func(s int) bool { return s%2 == 0 },
		"every fourth": func(s int) bool { return s%4 == 0 },
		"trains":       func(s int) bool { return s%80 < 72 },
	}
	for name, filled := range patterns {
		for _, n := range []int{2, 3, 4, 5, 8, 16, 24} {
			counts := make([]int, n)
			total := 0
			for s := 0; total < 200_000; s++ {
				if !filled(s) {
					continue
				}
				orbit, bcid := uint64(1000+s/detector.SlotsPerOrbit), uint32(s%detector.SlotsPerOrbit)
				p := Partition(orbit, bcid, n)
				if p < 0 || p >= n {
					t.Fatalf("Partition(%d, %d, %d) = %d", orbit, bcid, n, p)
				}
				counts[p]++
				total++
			}
			mean := float64(total) / float64(n)
			for p, c := range counts {
				// A fair share has a spread of sqrt(mean) (at most 1.3% of
				// the mean here); 5% is more than 3.5 spreads.
				if d := float64(c)/mean - 1; d > 0.05 || d < -0.05 {
					t.Errorf("%s, %d shares: share %d holds %d, mean %.0f", name, n, p, c, mean)
				}
			}
		}
	}
}

func TestPartitionStable(t *testing.T) {
	// Pinned values: a builder and the emulators routing to it must agree
	// across versions, so a change to the hash is a wire-format change.
	pinned := []struct {
		orbit uint64
		bcid  uint32
		n     int
		want  int
	}{
		{0, 0, 4, 2},
		{0, 1, 7, 3},
		{12345, 678, 16, 3},
		{40000000, 3563, 1024, 207},
		{1, 0, 2, 1},
		{7, 100, 3, 0},
	}
	for _, p := range pinned {
		if got := Partition(p.orbit, p.bcid, p.n); got != p.want {
			t.Errorf("Partition(%d, %d, %d) = %d, pinned %d", p.orbit, p.bcid, p.n, got, p.want)
		}
		if got := PartitionSlot(p.orbit*detector.SlotsPerOrbit+uint64(p.bcid), p.n); got != p.want {
			t.Errorf("PartitionSlot disagrees with Partition for orbit %d bcid %d", p.orbit, p.bcid)
		}
	}
	if Partition(9, 9, 1) != 0 {
		t.Error("one share must own everything")
	}
	defer func() {
		if recover() == nil {
			t.Error("Partition with n = 0 did not panic")
		}
	}()
	Partition(0, 0, 0)
}
