package builder

import (
	"math/rand/v2"
	"testing"
)

// TestCrossingTable checks the slot-index table against a map under random
// inserts and deletes, in a small table where probe runs collide and wrap.
func TestCrossingTable(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for _, n := range []int{1, 3, 8, 33} {
		tab := newCrossingTable(n)
		ref := map[uint64]int32{}
		for step := range 20000 {
			key := uint64(rng.IntN(4 * n))
			if rng.IntN(3) == 0 {
				key = rng.Uint64()
			}
			v, in := ref[key]
			switch {
			case in && rng.IntN(2) == 0:
				tab.del(key)
				delete(ref, key)
			case !in && len(ref) < n:
				v = int32(rng.IntN(1 << 20))
				tab.put(key, v)
				ref[key] = v
			}
			if step%7 == 0 || len(ref) == n {
				for k, v := range ref {
					if got := tab.get(k); got != v {
						t.Fatalf("n %d step %d: get(%d) = %d, want %d", n, step, k, got, v)
					}
				}
			}
			if _, in := ref[key]; !in && tab.get(key) != -1 {
				t.Fatalf("n %d step %d: deleted key %d still found", n, step, key)
			}
		}
	}
}
