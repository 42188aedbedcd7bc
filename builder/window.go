package builder

import "math/bits"

// The window: a fixed pool of crossing records, found by slot index through
// an open-addressing table and ordered by a min-heap on the slot index.
// Everything is allocated in New; tracking a crossing allocates nothing.

// crossing is one tracked bunch crossing: open (waiting for fragments) or
// emitted and remembered, so that stragglers are not opened anew.
type crossing struct {
	key   uint64 // absolute slot index orbit*Slots + bcid
	t     int64  // nominal time, ns
	first int64  // arrival time of the first fragment
	sent  int64  // smallest sentNs of its fragments
	n     int32  // fragments held while open
	open  bool
}

// crossingTable maps a slot index to its pool index. Linear probing with
// backward-shift deletion keeps it free of tombstones, so its probe lengths
// do not grow over a long run.
type crossingTable struct {
	keys  []uint64
	vals  []int32 // pool index, -1 for an empty cell
	mask  uint64
	shift uint
}

func newCrossingTable(n int) crossingTable {
	// At most half full: short probes.
	size := 1 << bits.Len(uint(2*n-1))
	if size < 2 {
		size = 2
	}
	t := crossingTable{
		keys:  make([]uint64, size),
		vals:  make([]int32, size),
		mask:  uint64(size - 1),
		shift: uint(64 - bits.TrailingZeros(uint(size))),
	}
	for i := range t.vals {
		t.vals[i] = -1
	}
	return t
}

// home is the cell a key hashes to (Fibonacci hashing: the multiplier is
// 2^64 divided by the golden ratio, which spreads consecutive keys).
func (t *crossingTable) home(key uint64) uint64 {
	return (key * 0x9E3779B97F4A7C15) >> t.shift
}

func (t *crossingTable) get(key uint64) int32 {
	for i := t.home(key); ; i = (i + 1) & t.mask {
		v := t.vals[i]
		if v < 0 {
			return -1
		}
		if t.keys[i] == key {
			return v
		}
	}
}

// put adds key, which must not be present.
func (t *crossingTable) put(key uint64, v int32) {
	i := t.home(key)
	for t.vals[i] >= 0 {
		i = (i + 1) & t.mask
	}
	t.keys[i], t.vals[i] = key, v
}

// del removes key, which must be present, and shifts later members of its
// probe run back so that every lookup still finds them.
func (t *crossingTable) del(key uint64) {
	i := t.home(key)
	for t.keys[i] != key || t.vals[i] < 0 {
		i = (i + 1) & t.mask
	}
	for j := (i + 1) & t.mask; t.vals[j] >= 0; j = (j + 1) & t.mask {
		// The entry at j may fill the hole at i if i lies on its probe
		// path, that is no further from its home than j is.
		if (j-t.home(t.keys[j]))&t.mask >= (j-i)&t.mask {
			t.keys[i], t.vals[i] = t.keys[j], t.vals[j]
			i = j
		}
	}
	t.vals[i] = -1
}

// heapPush adds pool index ci to the min-heap on slot index.
func (b *Builder) heapPush(ci int32) {
	h := append(b.heap, ci)
	key := b.pool[ci].key
	i := len(h) - 1
	for i > 0 {
		p := (i - 1) / 2
		if b.pool[h[p]].key <= key {
			break
		}
		h[i] = h[p]
		i = p
	}
	h[i] = ci
	b.heap = h
}

// heapPop removes and returns the oldest tracked crossing.
func (b *Builder) heapPop() int32 {
	h := b.heap
	top := h[0]
	last := h[len(h)-1]
	h = h[:len(h)-1]
	b.heap = h
	n := len(h)
	if n == 0 {
		return top
	}
	key := b.pool[last].key
	i := 0
	for {
		c := 2*i + 1
		if c >= n {
			break
		}
		if c+1 < n && b.pool[h[c+1]].key < b.pool[h[c]].key {
			c++
		}
		if b.pool[h[c]].key >= key {
			break
		}
		h[i] = h[c]
		i = c
	}
	h[i] = last
	return top
}

// track starts tracking a new crossing and returns its pool index.
func (b *Builder) track(key uint64, t, arrivalNs, sentNs int64) int32 {
	ci := b.free[len(b.free)-1]
	b.free = b.free[:len(b.free)-1]
	b.pool[ci] = crossing{key: key, t: t, first: arrivalNs, sent: sentNs, open: true}
	b.table.put(key, ci)
	b.heapPush(ci)
	b.waiting++
	return ci
}

// forget stops tracking crossing ci, which must have left the heap and
// must no longer be open.
func (b *Builder) forget(ci int32) {
	b.table.del(b.pool[ci].key)
	clear(b.have[int(ci)*b.words : int(ci+1)*b.words])
	b.free = append(b.free, ci)
}

// closeThrough marks every crossing up to and including time t as decided,
// so a fragment for one of them is late from now on.
func (b *Builder) closeThrough(t int64) {
	if t >= b.closed {
		b.closed = t + 1
	}
}

// release emits and forgets the crossings the closing time has passed,
// oldest first.
func (b *Builder) release() {
	for len(b.heap) > 0 {
		ci := b.heap[0]
		c := &b.pool[ci]
		if c.t >= b.closed {
			return
		}
		b.heapPop()
		if c.open {
			b.emit(ci, 0)
		}
		b.forget(ci)
	}
}

// Evict makes room for one more crossing as policy EvictOldest does: the
// oldest tracked crossing is emitted incomplete and flagged EVICTED if it
// is still open, or just forgotten if it was emitted, and everything up to
// it counts as decided. It reports false, changing nothing, when no
// crossing is tracked. It is for a caller of policy Block that can hold
// refused fragments no longer. It panics when called from the emit
// callback.
func (b *Builder) Evict() bool {
	if b.emitting {
		panic("builder: Evict called from the emit callback")
	}
	if len(b.heap) == 0 {
		return false
	}
	b.dropOldest(evictedFlag)
	return true
}

// dropOldest ends the oldest tracked crossing: everything up to it counts
// as decided, it is emitted with flag if still open, and forgotten. The
// heap must not be empty.
func (b *Builder) dropOldest(flag uint32) {
	ci := b.heapPop()
	c := &b.pool[ci]
	b.closeThrough(c.t)
	if c.open {
		b.emit(ci, flag)
	}
	b.forget(ci)
}

// trim brings the window back to its size after a new crossing went in
// beyond it (policy EvictOldest): the oldest tracked crossing is emitted as
// evicted if still open, or just forgotten if already emitted. Either way
// everything up to it counts as decided.
func (b *Builder) trim() {
	for len(b.heap) > b.window {
		b.dropOldest(evictedFlag)
	}
}

// makeRoom, for policy Block, forgets emitted crossings older than key
// until there is room for one more. It reports false, changing nothing
// more, if the oldest tracked crossing is still open or newer than key:
// Block never gives up data for room.
func (b *Builder) makeRoom(key uint64) bool {
	for len(b.heap) >= b.window {
		c := &b.pool[b.heap[0]]
		if c.open || c.key > key {
			return false
		}
		ci := b.heapPop()
		b.closeThrough(c.t)
		b.forget(ci)
	}
	return true
}

// sortedTracked returns the tracked pool indices, oldest first, in a
// scratch slice; the heap is left as it was.
func (b *Builder) sortedTracked() []int32 {
	s := b.scratch[:0]
	for len(b.heap) > 0 {
		s = append(s, b.heapPop())
	}
	// An ascending array is a valid min-heap.
	b.heap = append(b.heap[:0], s...)
	b.scratch = s
	return s
}
