package builder

import "github.com/bunchsieve/bunchsieve/detector"

// FNV-1a 64-bit parameters (Fowler, Noll, Vo; the same as the standard
// library's hash/fnv).
const (
	fnvOffset64 = 14695981039346656037
	fnvPrime64  = 1099511628211
)

// fnv1a64 hashes the 8 little-endian bytes of v with FNV-1a, without the
// allocation of a hash.Hash.
func fnv1a64(v uint64) uint64 {
	h := uint64(fnvOffset64)
	for range 8 {
		h ^= v & 0xff
		h *= fnvPrime64
		v >>= 8
	}
	return h
}

// Partition returns which of n builder shares owns crossing (orbit, bcid)
// of a 3564-slot ring: PartitionSlot of its absolute slot index. It is
// deterministic, safe for concurrent use, and panics unless 1 <= n <= 2^31.
func Partition(orbit uint64, bcid uint32, n int) int {
	return PartitionSlot(orbit*detector.SlotsPerOrbit+uint64(bcid), n)
}

// PartitionSlot returns which of n shares owns the crossing with absolute
// slot index slot: the FNV-1a hash of the index, reduced to 0..n-1 by its
// high bits (multiply-shift), since FNV's low bits mix poorly and filling
// schemes make slot indices regular. It is safe for concurrent use and
// panics unless 1 <= n <= 2^31.
func PartitionSlot(slot uint64, n int) int {
	if n < 1 || n > 1<<31 {
		panic("builder: partition count out of range, want 1..2^31")
	}
	return int(((fnv1a64(slot) >> 32) * uint64(n)) >> 32)
}
