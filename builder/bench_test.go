package builder

import (
	"math/rand/v2"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// benchRing is a ring of prepared fragments: ringCrossings consecutive
// crossings of 16 sources, in a shuffled source order per crossing. When the
// ring is used up its fragments are moved on by ringCrossings slots and
// resealed outside the timed region, so keys always increase.
type benchRing struct {
	frags []*pb.Fragment
	shift uint64 // slots added so far
	skip  int    // source index left out of every crossing, or -1
}

const (
	benchSources  = 16
	ringCrossings = 4096
)

func newBenchRing(skip int) *benchRing {
	rng := rand.New(rand.NewPCG(3, 4))
	r := &benchRing{skip: skip}
	order := make([]int, benchSources)
	for i := range order {
		order[i] = i
	}
	for range ringCrossings {
		rng.Shuffle(len(order), func(i, j int) { order[i], order[j] = order[j], order[i] })
		for _, s := range order {
			if s == skip {
				continue
			}
			// A calorimeter sector above zero suppression: 8 towers.
			towers, counts := make([]uint32, 8), make([]uint32, 8)
			for i := range towers {
				towers[i], counts[i] = uint32(s*512+rng.IntN(512)), uint32(rng.IntN(1000))
			}
			r.frags = append(r.frags, &pb.Fragment{SourceId: uint32(s + 1), Run: 1,
				Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: towers, EtCounts: counts}}})
		}
	}
	r.stamp()
	return r
}

// sealer computes checksums for the ring without allocating; its checksum
// agrees with pb.FragmentChecksum (TestChecksumMatchesWireFormat), so the
// resealed fragments are what Seal would make, only faster to prepare.
var sealer, _ = New(Config{Sources: []uint32{1}}, func(*Event) {})

// stamp writes counters and timestamps for the ring's current position.
func (r *benchRing) stamp() {
	clk := detector.DefaultClock()
	per := benchSources
	if r.skip >= 0 {
		per--
	}
	for i, f := range r.frags {
		k := r.shift + uint64(i/per)
		f.Orbit, f.Bcid = k/detector.SlotsPerOrbit, uint32(k%detector.SlotsPerOrbit)
		f.TimestampNs = clk.Nominal(f.Orbit, f.Bcid)
		f.Checksum = sealer.checksum(f)
	}
}

func benchAssemble(b *testing.B, cfg Config, skip int) {
	r := newBenchRing(skip)
	ids := make([]uint32, benchSources)
	for i := range ids {
		ids[i] = uint32(i + 1)
	}
	cfg.Run, cfg.Sources = 1, ids
	events := 0
	bl, err := New(cfg, func(ev *Event) { events++ })
	if err != nil {
		b.Fatal(err)
	}
	// Warm up one ring so the window reaches its steady state.
	for i, f := range r.frags {
		if err := bl.Add(f, int64(i), int64(i)); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	r.shift += ringCrossings
	r.stamp()
	b.StartTimer()
	b.ReportAllocs()
	b.ResetTimer()
	arrival := int64(len(r.frags))
	j := 0
	for range b.N {
		if j == len(r.frags) {
			b.StopTimer()
			r.shift += ringCrossings
			r.stamp()
			j = 0
			b.StartTimer()
		}
		if err := bl.Add(r.frags[j], arrival, arrival); err != nil {
			b.Fatal(err)
		}
		j++
		arrival++
	}
	b.StopTimer()
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "fragments/s")
	if s := bl.Stats(); !s.Balanced() || events == 0 {
		b.Fatalf("stats %+v", s)
	}
}

// BenchmarkAssemble measures steady-state event building from 16 sources:
// one op is one fragment.
func BenchmarkAssemble(b *testing.B) {
	b.Run("checksum", func(b *testing.B) { benchAssemble(b, Config{}, -1) })
	b.Run("skip-checksum", func(b *testing.B) { benchAssemble(b, Config{SkipChecksum: true}, -1) })
	// One source never sends: every crossing leaves through the watermark.
	// One source never sends: once it is dead (after 1 us of arrival time
	// here) every crossing leaves through the watermark.
	b.Run("one-missing", func(b *testing.B) { benchAssemble(b, Config{DeadAfter: 1000}, 5) })
}
