package detector

// TowerCount is one zero-suppressed tower reading: a global tower index and
// its transverse energy in least counts.
type TowerCount struct {
	Tower  uint32
	Counts uint32
}

// Crossing is one generated bunch crossing, already split by readout
// source. A Crossing is reused from call to call by generators; copy what
// must outlive the next call.
type Crossing struct {
	N           uint64 // crossing number in the run, from 0
	Orbit       uint64
	Bcid        uint32
	TimestampNs int64 // nominal crossing time, ns from run start
	// PerSource[i] holds the towers of source id i+1, by ascending index.
	PerSource [][]TowerCount
	// Saturated[i] is true when a tower of source id i+1 was clipped.
	Saturated []bool
	// Interactions is the number of inelastic interactions overlaid.
	Interactions int
	// TrueMETx and TrueMETy are minus the vector sum of the transverse
	// momenta of everything that escapes the calorimeter or falls outside
	// it (generator truth, GeV).
	TrueMETx, TrueMETy float64
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
	c.Interactions = 0
	c.TrueMETx, c.TrueMETy = 0, 0
}
