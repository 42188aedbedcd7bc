package builder

import (
	"cmp"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// The randomized test generates runs of crossings from 16 sources with
// faults (drops, duplicates, fragments delayed past the lateness, and bad
// fragments of every kind), then feeds each run in several arrival orders
// that shuffle fragments within the lateness. It asserts the accounting
// exactly and that the built events do not depend on the order.

const (
	rndSources   = 16
	rndLateness  = 2000 // ns of event time
	rndJitter    = 1500 // arrival spread of on-time fragments, below the lateness
	rndAnchorGap = 500  // each source reports at least this often (ns), see below
	rndTail      = 8000 // ns at the end of a run kept free of heavy delays and ghosts
)

// Fates of one (crossing, source) pair.
const (
	fateNormal = iota
	fateDropped
	fateDuplicated // sent twice, both copies on time
	fateHeavy      // sent once, delayed far past the lateness
)

// Kinds of extra bad fragment.
const (
	badChecksum = iota
	badRun
	badBcid
	badUnknown
	badTime
	badKinds
)

type rndFragment struct {
	f     *pb.Fragment
	t     int64 // nominal time of its crossing
	heavy bool
}

type rndInput struct {
	cfg      Config
	frags    []rndFragment
	crossing map[uint64]rndExpect // by slot index, crossings someone reported on time
	want     Stats                // expected counts after Flush
	perSrc   map[uint32]SourceStats
}

type rndExpect struct {
	sources, missing []uint32
}

// genInput draws one run. Every source is an "anchor" at least every
// rndAnchorGap ns of event time (it reports on time, without fault), which
// bounds how far the watermark can lag: a fragment delayed by more than
// rndLateness + rndJitter + rndAnchorGap + (two crossing gaps) is then
// certainly behind the watermark by more than the lateness when it
// arrives, and a fragment delayed less than rndJitter < rndLateness
// certainly is not. So the expected events are known exactly.
func genInput(rng *rand.Rand) rndInput {
	clk := detector.DefaultClock()
	const run = 41
	ids := make([]uint32, 0, rndSources)
	for len(ids) < rndSources {
		id := uint32(1 + rng.IntN(1000))
		if !slices.Contains(ids, id) {
			ids = append(ids, id)
		}
	}
	in := rndInput{
		cfg:      Config{Run: run, Sources: ids, Lateness: rndLateness},
		crossing: map[uint64]rndExpect{},
		perSrc:   map[uint32]SourceStats{},
	}
	key := uint64(rng.IntN(1000))*detector.SlotsPerOrbit + uint64(3400+rng.IntN(164))
	n := 150 + rng.IntN(150)
	keys := make([]uint64, n)
	for i := range keys {
		keys[i] = key
		key += uint64(1 + rng.IntN(8))
	}
	tEnd := clk.Nominal(keys[n-1]/detector.SlotsPerOrbit, uint32(keys[n-1]%detector.SlotsPerOrbit))
	lastAnchor := make([]int64, rndSources)
	for j := range lastAnchor {
		lastAnchor[j] = math.MinInt64 / 2
	}
	prevGhost := false
	add := func(f *pb.Fragment, t int64, heavy bool) {
		f.Seal()
		in.frags = append(in.frags, rndFragment{f: f, t: t, heavy: heavy})
	}
	mk := func(src uint32, k uint64, tag uint32) *pb.Fragment {
		return &pb.Fragment{SourceId: src, Run: run, Orbit: k / detector.SlotsPerOrbit, Bcid: uint32(k % detector.SlotsPerOrbit),
			TimestampNs: clk.Nominal(k/detector.SlotsPerOrbit, uint32(k%detector.SlotsPerOrbit)) + int64(rng.IntN(11)) - 5,
			Payload:     &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{tag}, EtCounts: []uint32{uint32(rng.IntN(500))}}}}
	}
	for ci, k := range keys {
		t := clk.Nominal(k/detector.SlotsPerOrbit, uint32(k%detector.SlotsPerOrbit))
		faultsAllowed := t < tEnd-rndTail
		ghost := faultsAllowed && !prevGhost && rng.IntN(100) < 3
		prevGhost = ghost
		var ex rndExpect
		for j, id := range ids {
			st := in.perSrc[id]
			fate := fateNormal
			switch {
			case ghost:
				fate = fateDropped
				if rng.IntN(2) == 0 {
					fate = fateHeavy
				}
			case t-lastAnchor[j] >= rndAnchorGap:
				lastAnchor[j] = t
			default:
				switch r := rng.IntN(100); {
				case r < 8:
					fate = fateDropped
				case r < 16:
					fate = fateDuplicated
				case r < 22 && faultsAllowed:
					fate = fateHeavy
				}
			}
			tag := uint32(ci*100 + j)
			switch fate {
			case fateNormal:
				add(mk(id, k, tag), t, false)
				ex.sources = append(ex.sources, id)
				st.Received++
				st.InEvents++
			case fateDuplicated:
				f := mk(id, k, tag)
				g := &pb.Fragment{SourceId: f.SourceId, Run: f.Run, Orbit: f.Orbit, Bcid: f.Bcid, TimestampNs: f.TimestampNs,
					Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{tag}, EtCounts: f.GetCalo().EtCounts}}}
				add(f, t, false)
				add(g, t, false)
				ex.sources = append(ex.sources, id)
				st.Received += 2
				st.InEvents++
				st.Duplicate++
			case fateHeavy:
				add(mk(id, k, tag), t, true)
				ex.missing = append(ex.missing, id)
				st.Received++
				st.Late++
			case fateDropped:
				ex.missing = append(ex.missing, id)
			}
			in.perSrc[id] = st
		}
		if len(ex.sources) > 0 {
			slices.Sort(ex.sources)
			slices.Sort(ex.missing)
			in.crossing[k] = ex
			for _, id := range ex.missing {
				st := in.perSrc[id]
				st.Missing++
				in.perSrc[id] = st
			}
		}
		// A bad fragment now and then; it touches nothing but its counter.
		if rng.IntN(10) == 0 {
			j := rng.IntN(rndSources)
			id := ids[j]
			f := mk(id, k, 0)
			st := in.perSrc[id]
			st.Received++
			st.Malformed++
			switch rng.IntN(badKinds) {
			case badChecksum:
				add(f, t, false)
				f.GetCalo().EtCounts[0]++ // after sealing
				st.MalformedChecksum++
				in.want.MalformedChecksum++
			case badRun:
				f.Run = run + 1
				add(f, t, false)
				st.MalformedRun++
				in.want.MalformedRun++
			case badBcid:
				f.Bcid = uint32(detector.SlotsPerOrbit + rng.IntN(1000))
				add(f, t, false)
				st.MalformedBcid++
				in.want.MalformedBcid++
			case badUnknown:
				f.SourceId = 5000 + uint32(rng.IntN(100))
				add(f, t, false)
				st.Received--
				st.Malformed--
				in.want.UnknownSource++
			case badTime:
				off := int64(6 + rng.IntN(7))
				if rng.IntN(4) == 0 {
					off = 1_000_000 // a millisecond off: never this crossing
				}
				if rng.IntN(2) == 0 {
					off = -off
				}
				f.TimestampNs = t + off
				add(f, t, false)
				st.Malformed--
				st.OutOfTime++
				in.want.OutOfTime++
			}
			in.perSrc[id] = st
		}
	}
	for _, st := range in.perSrc {
		in.want.Received += st.Received
		in.want.InEvents += st.InEvents
		in.want.Duplicate += st.Duplicate
		in.want.Late += st.Late
	}
	in.want.Received += in.want.UnknownSource // every other bad fragment names an expected source
	in.want.Malformed = in.want.MalformedChecksum + in.want.MalformedRun + in.want.MalformedBcid
	for _, ex := range in.crossing {
		if len(ex.missing) == 0 {
			in.want.EventsComplete++
		} else {
			in.want.EventsIncomplete++
		}
	}
	return in
}

type arrival struct {
	rndFragment
	at, sent int64
}

// arrange returns one arrival order of in: on-time fragments arrive within
// rndJitter of their crossing, heavy ones far past the lateness.
func arrange(in rndInput, rng *rand.Rand) []arrival {
	const heavyMin = rndLateness + rndJitter + rndAnchorGap + 2*8*25 + 100
	a := make([]arrival, len(in.frags))
	for i, f := range in.frags {
		d := int64(rng.IntN(rndJitter))
		if f.heavy {
			d = heavyMin + int64(rng.IntN(3000))
		}
		a[i] = arrival{rndFragment: f, at: f.t + d, sent: f.t + d - int64(rng.IntN(100))}
	}
	rng.Shuffle(len(a), func(i, j int) { a[i], a[j] = a[j], a[i] })
	slices.SortStableFunc(a, func(x, y arrival) int { return cmp.Compare(x.at, y.at) })
	return a
}

// feed runs one arrival order through a new builder and returns its events
// by slot index, checking the conservation law after every fragment.
func feed(t *testing.T, in rndInput, order []arrival) map[uint64]record {
	t.Helper()
	b, c := newBuilder(t, in.cfg)
	got := map[uint64]record{}
	first := map[uint64]int64{}
	sent := map[uint64]int64{}
	collect := func() {
		for _, e := range c.take() {
			k := e.key()
			if _, dup := got[k]; dup {
				t.Fatalf("crossing %v emitted twice", e)
			}
			got[k] = e
		}
	}
	for i, a := range order {
		err := b.Add(a.f, a.at, a.sent)
		if err == nil {
			k := a.f.Orbit*detector.SlotsPerOrbit + uint64(a.f.Bcid)
			if _, ok := first[k]; !ok {
				first[k], sent[k] = a.at, a.sent
			}
			sent[k] = min(sent[k], a.sent)
		}
		if !b.Stats().Balanced() {
			t.Fatalf("after fragment %d: accounting not conserved: %+v", i, b.Stats())
		}
		if i%97 == 0 {
			checkBalanced(t, b, DefaultWindow)
		}
		collect()
	}
	b.Flush()
	collect()
	checkBalanced(t, b, DefaultWindow)

	s := b.Stats()
	w := in.want
	s.Open, s.Waiting, s.Live, s.WatermarkNs, s.ClosedNs, s.EventsFlushed = 0, 0, 0, 0, 0, 0
	if s != w {
		t.Fatalf("stats\n got %+v\nwant %+v", s, w)
	}
	for id, want := range in.perSrc {
		ss, _ := b.SourceStats(id)
		ss.WatermarkNs, ss.LastArrivalNs, ss.Alive = 0, 0, false
		if ss != want {
			t.Fatalf("source %d\n got %+v\nwant %+v", id, ss, want)
		}
	}
	for k, e := range got {
		if e.FirstArrivalNs != first[k] || e.EarliestSentNs != sent[k] {
			t.Fatalf("crossing %v: first arrival %d sent %d, want %d %d", e, e.FirstArrivalNs, e.EarliestSentNs, first[k], sent[k])
		}
	}
	return got
}

func TestRandomizedRuns(t *testing.T) {
	inputs, orders := 60, 3
	if testing.Short() {
		inputs = 15
	}
	var total Stats
	var events, flushed int
	defer func() {
		t.Logf("%d inputs x %d orders: %d events (%d flushed at the end), %d fragments: %d duplicate, %d late, %d malformed, %d unknown source, %d out of time",
			inputs, orders, events, flushed, total.Received, total.Duplicate, total.Late, total.Malformed, total.UnknownSource, total.OutOfTime)
	}()
	for it := range inputs {
		rng := rand.New(rand.NewPCG(2015, uint64(it)))
		in := genInput(rng)
		var ref map[uint64]record
		for o := range orders {
			got := feed(t, in, arrange(in, rand.New(rand.NewPCG(uint64(it), uint64(o)))))
			if o == 0 {
				w := in.want
				total.Received += w.Received
				total.Duplicate += w.Duplicate
				total.Late += w.Late
				total.Malformed += w.Malformed
				total.UnknownSource += w.UnknownSource
				total.OutOfTime += w.OutOfTime
				events += len(got)
				for _, e := range got {
					if e.Flags&flushedFlag != 0 {
						flushed++
					}
				}
			}
			// Exactly the crossings someone reported on time, once each,
			// with what was dropped or delayed past the lateness missing.
			if len(got) != len(in.crossing) {
				t.Fatalf("input %d order %d: %d events, want %d", it, o, len(got), len(in.crossing))
			}
			for k, ex := range in.crossing {
				e, ok := got[k]
				if !ok {
					t.Fatalf("input %d order %d: crossing %d not emitted", it, o, k)
				}
				if !slices.Equal(e.Sources, ex.sources) || !slices.Equal(e.Missing, ex.missing) {
					t.Fatalf("input %d order %d: event %v, want sources %v missing %v", it, o, e, ex.sources, ex.missing)
				}
				if inc := e.Flags&incompleteFlag != 0; inc != (len(ex.missing) > 0) || e.Flags&evictedFlag != 0 {
					t.Fatalf("input %d order %d: event %v has flags %b", it, o, e, e.Flags)
				}
				if e.TimestampNs != detector.DefaultClock().Nominal(e.Orbit, e.Bcid) || e.Run != in.cfg.Run {
					t.Fatalf("input %d order %d: event %v has time %d", it, o, e, e.TimestampNs)
				}
			}
			if o == 0 {
				ref = got
				continue
			}
			// The same events, whatever the arrival order.
			for k, e := range got {
				r := ref[k]
				if !sameEvent(e, r) {
					t.Fatalf("input %d: order %d built %v, order 0 built %v", it, o, e, r)
				}
			}
		}
	}
}

// sameEvent compares events by crossing, fragment set, missing list and
// flags; arrival and send times legitimately differ between orders.
func sameEvent(a, b record) bool {
	return a.Orbit == b.Orbit && a.Bcid == b.Bcid && a.TimestampNs == b.TimestampNs && a.Flags == b.Flags &&
		slices.Equal(a.Sources, b.Sources) && slices.Equal(a.Stamps, b.Stamps) && slices.Equal(a.Tags, b.Tags) &&
		slices.Equal(a.Missing, b.Missing)
}
