package detector

// TowerCount is one zero-suppressed tower reading: a global tower index and
// its transverse energy in least counts.
type TowerCount struct {
	Tower  uint32
	Counts uint32
}

// MuonHit is one muon-station hit in detector coordinates: x, y in the
// transverse plane and z along the beam, in mm from the nominal interaction
// point. Station counts the stations of Geometry.MuonStations from 0.
type MuonHit struct {
	Station int
	X, Y, Z float64
}

// Crossing is one generated bunch crossing, already split by readout
// source. A Crossing is reused from call to call by generators; copy what
// must outlive the next call.
type Crossing struct {
	N           uint64 // crossing number in the run, from 0
	Orbit       uint64
	Bcid        uint32
	TimestampNs int64 // nominal crossing time, ns from run start
	// PerSource[i] holds the towers of calorimeter source id i+1, by
	// ascending index.
	PerSource [][]TowerCount
	// Saturated[i] is true when a tower of calorimeter source id i+1 was
	// clipped.
	Saturated []bool
	// SourceTimestampNs[i] is the crossing time as the clock of source id
	// i+1 saw it (calorimeter then muon sources), ns from run start. It is
	// empty when the generator does not model source clocks; every source
	// then reports TimestampNs (see SourceTimestamp).
	SourceTimestampNs []int64
	// MuonHits[k] holds the hits read by the muon source at position k
	// (id Partition.MuonSourceID(k)), sorted by station. It is empty when
	// the generator has no muon model (the toy generator).
	MuonHits [][]MuonHit
	// Interactions is the number of inelastic interactions overlaid.
	Interactions int
	// TrueMETx and TrueMETy are the true missing transverse momentum
	// (generator truth, GeV): the vector sum of the transverse momenta of
	// the non-interacting particles and of every particle outside the
	// calorimeter acceptance. For a balanced crossing it equals minus the
	// vector sum of everything the calorimeter could see, which is what a
	// calorimeter MET estimates.
	TrueMETx, TrueMETy float64
	// Truth is the generator record of the crossing's hard processes; the
	// toy generator leaves it empty.
	Truth Truth
}

// SourceTimestamp returns the timestamp source id reports for the crossing:
// its own clock's reading when the generator models source clocks, the
// nominal time otherwise.
func (c *Crossing) SourceTimestamp(id uint32) int64 {
	if id >= 1 && int(id) <= len(c.SourceTimestampNs) {
		return c.SourceTimestampNs[id-1]
	}
	return c.TimestampNs
}

// Generator makes crossings deterministically: the same n and seed always
// give the same crossing. Implementations are not safe for concurrent use;
// give each goroutine its own.
type Generator interface {
	Generate(n uint64, c *Crossing)
}

func (c *Crossing) reset(sources int) {
	if cap(c.PerSource) < sources {
		c.PerSource = make([][]TowerCount, sources)
		c.Saturated = make([]bool, sources)
	}
	c.PerSource = c.PerSource[:sources]
	c.Saturated = c.Saturated[:sources]
	for i := range c.PerSource {
		c.PerSource[i] = c.PerSource[i][:0]
		c.Saturated[i] = false
	}
	c.SourceTimestampNs = c.SourceTimestampNs[:0]
	c.MuonHits = c.MuonHits[:0]
	c.Interactions = 0
	c.TrueMETx, c.TrueMETy = 0, 0
	c.Truth.reset()
}

// resetMuons sizes MuonHits for m muon sources and empties every list.
func (c *Crossing) resetMuons(m int) {
	if cap(c.MuonHits) < m {
		c.MuonHits = make([][]MuonHit, m)
	}
	c.MuonHits = c.MuonHits[:m]
	for i := range c.MuonHits {
		c.MuonHits[i] = c.MuonHits[i][:0]
	}
}
