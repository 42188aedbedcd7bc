package builder

import (
	"fmt"
	"math"
	"math/bits"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

const (
	incompleteFlag = uint32(pb.EventFlag_EVENT_FLAG_INCOMPLETE)
	evictedFlag    = uint32(pb.EventFlag_EVENT_FLAG_EVICTED)
	flushedFlag    = uint32(pb.EventFlag_EVENT_FLAG_FLUSHED)
)

// Builder assembles the fragments of each bunch crossing into events. See
// the package documentation for the rules.
//
// A Builder is not safe for concurrent use: one goroutine owns it (scale
// out by giving each Builder its own share of crossings, see Partition).
// Its methods panic if called from inside the emit callback.
type Builder struct {
	emitFn   func(*Event)
	run      uint32
	mode     Mode
	slots    uint64
	slotNs   float64
	phaseNs  float64
	maxKey   uint64 // largest slot index with a nominal time below maxTimeNs
	maxOrbit uint64
	tol      int64
	lateness int64
	deadAft  int64
	window   int
	policy   Policy
	verify   bool // checksums
	counters bool // ByTimestamp: check non-zero counters

	ids   []uint32 // expected sources, ascending; index = source index
	src   []source
	index sourceIndex
	words int // have-mask words per crossing

	pool  []crossing
	frags []*pb.Fragment // pool index * len(ids) + source index; nil if absent
	have  []uint64       // which sources a crossing has had, open or emitted
	free  []int32
	heap  []int32
	table crossingTable

	waiting int // open crossings

	started  bool
	now      int64 // latest arrival time seen
	deadline int64 // no live source can be dead before this arrival time
	live     int   // live sources
	wm       int64 // global watermark, math.MinInt64 while undefined
	atMin    int   // live sources whose watermark equals wm
	closed   int64 // crossings with nominal time below this are decided

	ev       Event
	scratch  []int32
	crc      pb.Checksummer
	emitting bool
	st       Stats
}

// source is the state kept for one expected source.
type source struct {
	wm    int64 // largest event time sent, math.MinInt64 before the first
	last  int64 // arrival time of its latest fragment
	alive bool
	st    SourceStats
}

// New returns a Builder for cfg that hands every event it builds to emit.
// The error names the Config field at fault. All memory the Builder needs
// is allocated here: about Window x len(Sources) pointers.
func New(cfg Config, emit func(*Event)) (*Builder, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	if emit == nil {
		return nil, fmt.Errorf("builder: emit callback is nil")
	}
	n := len(cfg.Sources)
	slots := uint64(cfg.Clock.Slots)
	maxKey := uint64((maxTimeNs - math.Abs(cfg.Clock.PhaseNs)) / cfg.Clock.SlotNs)
	b := &Builder{
		emitFn:   emit,
		run:      cfg.Run,
		mode:     cfg.Mode,
		slots:    slots,
		slotNs:   cfg.Clock.SlotNs,
		phaseNs:  cfg.Clock.PhaseNs,
		maxKey:   maxKey,
		maxOrbit: maxKey / slots,
		tol:      cfg.Tolerance,
		lateness: cfg.Lateness,
		deadAft:  cfg.DeadAfter,
		window:   cfg.Window,
		policy:   cfg.WhenFull,
		verify:   !cfg.SkipChecksum,
		counters: !cfg.IgnoreCounters,
		ids:      cfg.Sources,
		src:      make([]source, n),
		index:    newSourceIndex(cfg.Sources),
		words:    (n + 63) / 64,
		wm:       math.MinInt64,
		closed:   math.MinInt64,
		live:     n,
		atMin:    n,
	}
	for i := range b.src {
		b.src[i] = source{wm: math.MinInt64, alive: true}
	}
	// One record more than the window: EvictOldest puts a new crossing in
	// first and then evicts the oldest, which may be the new one.
	size := cfg.Window + 1
	b.pool = make([]crossing, size)
	b.frags = make([]*pb.Fragment, size*n)
	b.have = make([]uint64, size*b.words)
	b.free = make([]int32, size)
	for i := range b.free {
		b.free[i] = int32(size - 1 - i)
	}
	b.heap = make([]int32, 0, size)
	b.scratch = make([]int32, 0, size)
	b.table = newCrossingTable(size)
	b.ev = Event{Run: cfg.Run, Fragments: make([]*pb.Fragment, 0, n), Missing: make([]uint32, 0, n)}
	return b, nil
}

// Add offers fragment f, which arrived at arrivalNs (arrival time, the
// clock DeadAfter is measured on) and was sent at sentNs (any clock; the
// event reports the smallest). It returns nil when f went into a crossing;
// that may complete the crossing and emit its event before Add returns.
// Otherwise it returns a *FragmentError wrapping ErrMalformed,
// ErrUnknownSource, ErrOutOfTime, ErrDuplicate or ErrLate, and f is
// counted under that reason; or, with policy Block, one wrapping
// ErrWindowFull, and f is neither consumed nor counted as received.
//
// The Builder keeps f until its event is emitted: do not modify f before.
// Add also runs dead-source detection at arrivalNs, as Advance does.
// Add(nil) returns an error wrapping ErrMalformed and counts nothing.
func (b *Builder) Add(f *pb.Fragment, arrivalNs, sentNs int64) error {
	return b.add(f, checkHere, arrivalNs, sentNs)
}

// AddChecked is Add for a fragment whose checksum the caller has already
// compared with its content (Fragment.Intact or a Checksummer of its own,
// on another goroutine, say): intact is the outcome. The Builder does not
// checksum f itself, whatever Config.SkipChecksum says; a false intact
// rejects f exactly as Add rejects a fragment whose checksum does not
// match (ErrMalformed, ReasonMalformedChecksum), and everything else is as
// Add. It lets callers spread checksum verification over goroutines while
// one goroutine owns the Builder. It panics when called from the emit
// callback, as Add does.
func (b *Builder) AddChecked(f *pb.Fragment, intact bool, arrivalNs, sentNs int64) error {
	v := checkedIntact
	if !intact {
		v = checkedDamaged
	}
	return b.add(f, v, arrivalNs, sentNs)
}

// checkVerdict says who checks a fragment's checksum in add.
type checkVerdict uint8

const (
	checkHere      checkVerdict = iota // the Builder, unless SkipChecksum
	checkedIntact                      // the caller; it matched
	checkedDamaged                     // the caller; it did not match
)

func (b *Builder) add(f *pb.Fragment, v checkVerdict, arrivalNs, sentNs int64) error {
	if b.emitting {
		panic("builder: Add called from the emit callback")
	}
	if f == nil {
		return errNilFragment
	}
	b.tick(arrivalNs)

	si := b.index.find(f.SourceId)
	if v == checkedDamaged || v == checkHere && b.verify && b.checksum(f) != f.Checksum {
		return b.reject(f, si, ReasonMalformedChecksum, nil)
	}
	if f.Run != b.run {
		return b.reject(f, si, ReasonMalformedRun, nil)
	}
	if si < 0 {
		return b.reject(f, si, ReasonUnknownSource, nil)
	}

	var key uint64
	switch b.mode {
	case ByCounter:
		if uint64(f.Bcid) >= b.slots || f.Orbit > b.maxOrbit {
			return b.reject(f, si, ReasonMalformedBcid, nil)
		}
		key = f.Orbit*b.slots + uint64(f.Bcid)
		if key > b.maxKey {
			return b.reject(f, si, ReasonMalformedBcid, nil)
		}
	default: // ByTimestamp
		if b.counters && uint64(f.Bcid) >= b.slots {
			return b.reject(f, si, ReasonMalformedBcid, nil)
		}
		k, ok := b.slotOf(f.TimestampNs)
		if !ok {
			return b.reject(f, si, ReasonOutOfTime, nil)
		}
		key = k
	}

	ci := b.table.get(key)
	var t int64
	if ci >= 0 {
		t = b.pool[ci].t
	} else {
		t = b.nominal(key)
	}
	if err := b.checkTime(f, si, key, t); err != nil {
		return err
	}

	word, bit := si>>6, uint64(1)<<(si&63)
	if ci >= 0 {
		c := &b.pool[ci]
		if b.have[int(ci)*b.words+word]&bit != 0 {
			return b.rejectValid(f, si, ReasonDuplicate, key, t)
		}
		if !c.open {
			return b.rejectValid(f, si, ReasonLate, key, t)
		}
		if sentNs < c.sent {
			c.sent = sentNs
		}
	} else {
		if t < b.closed {
			return b.rejectValid(f, si, ReasonLate, key, t)
		}
		if len(b.heap) >= b.window && b.policy == Block && !b.makeRoom(key) {
			// The source is sending: a live one stays alive while its
			// fragments wait for room, or a caller holding them back
			// would see its sources declared dead. Its watermark stays
			// (the fragment is not in), and a dead one revives only when
			// a fragment goes in.
			if s := &b.src[si]; s.alive {
				s.last = b.now
			}
			b.st.WindowFullRefusals++
			return b.refuse(f, key, t)
		}
		ci = b.track(key, t, arrivalNs, sentNs)
	}

	// Accepted.
	c := &b.pool[ci]
	b.have[int(ci)*b.words+word] |= bit
	b.frags[int(ci)*len(b.ids)+si] = f
	c.n++
	s := &b.src[si]
	s.st.Received++
	s.st.Pending++
	b.st.Received++
	b.st.Pending++
	// The watermark moves first, so older crossings it releases leave
	// before this one if this one is now complete. It cannot release this
	// crossing: t is not behind the closing time, and one source's own
	// fragment never lifts the watermark past t+Lateness.
	b.touch(si, t)
	if int(c.n) == len(b.ids) {
		b.emit(ci, 0)
	}
	if len(b.heap) > b.window {
		b.trim()
	}
	return nil
}

// crossingRef names the crossing a rejected fragment was matched to.
type crossingRef struct {
	key uint64
	t   int64
}

// checkTime checks f's timestamp against its crossing at nominal time t:
// in ByCounter mode a zero timestamp means the source does not stamp its
// fragments and is not checked; in ByTimestamp mode the slot already
// matched the timestamp and non-zero counters are checked instead.
func (b *Builder) checkTime(f *pb.Fragment, si int, key uint64, t int64) error {
	if b.mode == ByCounter {
		if ts := f.TimestampNs; ts != 0 && (ts-t > b.tol || t-ts > b.tol) {
			return b.reject(f, si, ReasonOutOfTime, &crossingRef{key, t})
		}
		return nil
	}
	if ts := f.TimestampNs; ts-t > b.tol || t-ts > b.tol {
		return b.reject(f, si, ReasonOutOfTime, &crossingRef{key, t})
	}
	if b.counters && (f.Orbit != 0 || f.Bcid != 0) && (f.Orbit != key/b.slots || uint64(f.Bcid) != key%b.slots) {
		return b.rejectCounters(f, si, key, t)
	}
	return nil
}

// nominal returns the nominal time of slot key, computed exactly as
// detector.Clock.Nominal does.
func (b *Builder) nominal(key uint64) int64 {
	return int64(math.Round(float64(key)*b.slotNs + b.phaseNs))
}

// slotOf returns the slot whose nominal time is nearest to ts, or false if
// ts lies before the first slot or beyond the times the builder handles.
func (b *Builder) slotOf(ts int64) (uint64, bool) {
	x := math.Round((float64(ts) - b.phaseNs) / b.slotNs)
	if !(x >= 0) || x > float64(b.maxKey) {
		return 0, false
	}
	return uint64(x), true
}

// tick advances the builder's arrival clock to now (never backwards) and
// declares dead the sources silent for longer than DeadAfter.
func (b *Builder) tick(now int64) {
	if !b.started {
		b.start(now)
		return
	}
	if now > b.now {
		b.now = now
	}
	if b.now > b.deadline {
		b.checkDead()
	}
}

// start sets the arrival clock at the first call: a source that never
// sends is dead DeadAfter after it.
func (b *Builder) start(now int64) {
	b.started = true
	b.now = now
	for i := range b.src {
		b.src[i].last = now
	}
	b.deadline = satAdd(now, b.deadAft)
}

// Advance moves the builder's arrival clock to nowNs: sources silent for
// longer than DeadAfter are declared dead and leave the watermark, which
// may emit crossings that were waiting only for them. When no source is
// left alive, every open crossing is emitted incomplete at once. An
// earlier nowNs than already seen does not move the clock back.
func (b *Builder) Advance(nowNs int64) {
	if b.emitting {
		panic("builder: Advance called from the emit callback")
	}
	b.tick(nowNs)
}

// Flush ends the run: it emits every open crossing, oldest first, flagged
// FLUSHED (and INCOMPLETE, since complete ones have already gone), and
// forgets every tracked crossing. The Builder stays usable; a fragment for
// a crossing no later than the newest one tracked at Flush counts as late.
func (b *Builder) Flush() {
	if b.emitting {
		panic("builder: Flush called from the emit callback")
	}
	for len(b.heap) > 0 {
		b.dropOldest(flushedFlag)
	}
}

// Resume continues a run that another Builder began and ended with Flush,
// whose closing time (Stats.ClosedNs) was closedNs: every crossing with a
// nominal time before it counts as decided, so a fragment for one of them
// is late here rather than the start of a second event of that crossing.
// Call it before the first Add; it never moves the closing time back. It
// panics when called from the emit callback.
func (b *Builder) Resume(closedNs int64) {
	if b.emitting {
		panic("builder: Resume called from the emit callback")
	}
	if closedNs > b.closed {
		b.closed = closedNs
	}
}

// reject counts f under reason r and returns its error. x is the crossing
// f was matched to, if any.
func (b *Builder) reject(f *pb.Fragment, si int, r Reason, x *crossingRef) error {
	b.st.Received++
	var s *SourceStats
	if si >= 0 {
		s = &b.src[si].st
		s.Received++
	}
	e := &FragmentError{Reason: r, SourceID: f.SourceId, Run: f.Run, Orbit: f.Orbit, Bcid: f.Bcid, TimestampNs: f.TimestampNs}
	if x != nil {
		e.CrossingOrbit, e.CrossingBcid, e.NominalNs = x.key/b.slots, uint32(x.key%b.slots), x.t
	}
	switch r {
	case ReasonMalformedChecksum:
		b.st.Malformed++
		b.st.MalformedChecksum++
		if s != nil {
			s.Malformed++
			s.MalformedChecksum++
		}
	case ReasonMalformedRun:
		b.st.Malformed++
		b.st.MalformedRun++
		if s != nil {
			s.Malformed++
			s.MalformedRun++
		}
		e.limit = int64(b.run)
	case ReasonMalformedBcid:
		b.st.Malformed++
		b.st.MalformedBcid++
		s.Malformed++
		s.MalformedBcid++
		e.limit = int64(b.slots)
		e.counters = uint64(f.Bcid) < b.slots
	case ReasonUnknownSource:
		b.st.UnknownSource++
	case ReasonOutOfTime:
		b.st.OutOfTime++
		s.OutOfTime++
		e.limit = b.tol
		if x == nil {
			// No slot at all: report the nearest representable crossing.
			k := uint64(0)
			if (float64(f.TimestampNs)-b.phaseNs)/b.slotNs > 0 {
				k = b.maxKey
			}
			e.CrossingOrbit, e.CrossingBcid, e.NominalNs = k/b.slots, uint32(k%b.slots), b.nominal(k)
		}
	case ReasonDuplicate:
		b.st.Duplicate++
		s.Duplicate++
	case ReasonLate:
		b.st.Late++
		s.Late++
	}
	return e
}

// rejectValid counts a duplicate or late fragment. It is valid, so its
// source is alive and its watermark moves.
func (b *Builder) rejectValid(f *pb.Fragment, si int, r Reason, key uint64, t int64) error {
	err := b.reject(f, si, r, &crossingRef{key, t})
	b.touch(si, t)
	return err
}

// rejectCounters counts an out-of-time fragment whose counters disagree
// with the slot of its timestamp.
func (b *Builder) rejectCounters(f *pb.Fragment, si int, key uint64, t int64) error {
	err := b.reject(f, si, ReasonOutOfTime, &crossingRef{key, t})
	err.(*FragmentError).counters = true
	return err
}

// refuse returns the error for a fragment refused for want of room.
func (b *Builder) refuse(f *pb.Fragment, key uint64, t int64) error {
	return &FragmentError{Reason: ReasonWindowFull, SourceID: f.SourceId, Run: f.Run, Orbit: f.Orbit, Bcid: f.Bcid, TimestampNs: f.TimestampNs,
		CrossingOrbit: key / b.slots, CrossingBcid: uint32(key % b.slots), NominalNs: t, limit: int64(b.window)}
}

// satAdd returns a+b, clamped to the int64 range.
func satAdd(a, b int64) int64 {
	if b > 0 && a > math.MaxInt64-b {
		return math.MaxInt64
	}
	if b < 0 && a < math.MinInt64-b {
		return math.MinInt64
	}
	return a + b
}

// sourceIndex maps a source id to its index in the sorted id list with an
// open-addressing table: no map lookup on the hot path.
type sourceIndex struct {
	keys  []uint32 // 0 marks an empty cell; ids are > 0
	vals  []int32
	mask  uint32
	shift uint
}

func newSourceIndex(ids []uint32) sourceIndex {
	size := 1 << bits.Len(uint(4*len(ids)-1))
	x := sourceIndex{keys: make([]uint32, size), vals: make([]int32, size), mask: uint32(size - 1), shift: uint(32 - bits.TrailingZeros(uint(size)))}
	for i, id := range ids {
		j := x.home(id)
		for x.keys[j] != 0 {
			j = (j + 1) & x.mask
		}
		x.keys[j], x.vals[j] = id, int32(i)
	}
	return x
}

func (x *sourceIndex) home(id uint32) uint32 {
	return (id * 0x9E3779B1) >> x.shift
}

// find returns the index of source id, or -1 if it is not expected.
func (x *sourceIndex) find(id uint32) int {
	if id == 0 {
		return -1
	}
	for j := x.home(id); ; j = (j + 1) & x.mask {
		k := x.keys[j]
		if k == id {
			return int(x.vals[j])
		}
		if k == 0 {
			return -1
		}
	}
}
