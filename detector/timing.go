package detector

import (
	"math"
	"math/rand/v2"
)

// sourceClocks models the readout clocks: each source's timestamp is the
// nominal crossing time plus a fixed offset of that source (uniform in
// +-ReadoutConfig.ClockOffsetMaxNs, drawn once per seed) plus Gaussian
// jitter (ReadoutConfig.ClockJitterNs) drawn per crossing, rounded to ns.
// It is not safe for concurrent use.
type sourceClocks struct {
	clock   Clock
	offsets []float64 // per source id - 1
	jitter  float64
	seed    uint64
	src     *rand.PCG
	rng     *rand.Rand
}

func newSourceClocks(rc ReadoutConfig, sources int, seed uint64) *sourceClocks {
	sc := &sourceClocks{clock: DefaultClock(), offsets: make([]float64, sources), jitter: rc.ClockJitterNs, seed: seed}
	r := rand.New(rand.NewPCG(seed, 0x636c6f636b6f6666))
	for i := range sc.offsets {
		sc.offsets[i] = rc.ClockOffsetMaxNs * (2*r.Float64() - 1)
	}
	sc.src = rand.NewPCG(0, 0)
	sc.rng = rand.New(sc.src)
	return sc
}

// fill sets c's nominal and per-source timestamps. The jitter has a stream
// of its own per crossing, so it depends on (seed, n, source) only, not on
// the physics of the crossing.
func (sc *sourceClocks) fill(c *Crossing) {
	c.TimestampNs = sc.clock.Nominal(c.Orbit, c.Bcid)
	nominal := float64(sc.clock.SlotIndex(c.Orbit, c.Bcid))*sc.clock.SlotNs + sc.clock.PhaseNs
	sc.src.Seed(sc.seed^0x74696d696e676a74, c.N*0x9e3779b97f4a7c15+2)
	c.SourceTimestampNs = c.SourceTimestampNs[:0]
	for _, off := range sc.offsets {
		t := nominal + off
		if sc.jitter > 0 {
			t += sc.jitter * sc.rng.NormFloat64()
		}
		c.SourceTimestampNs = append(c.SourceTimestampNs, int64(math.Round(t)))
	}
}
