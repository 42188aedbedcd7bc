package detector

import "fmt"

// FillingConfig describes which bunch slots of an orbit hold colliding
// bunches, as blocks of trains in orbit order (see lantern.yaml).
type FillingConfig struct {
	Name   string       `yaml:"name"`
	Offset int          `yaml:"offset"`
	Blocks []TrainBlock `yaml:"blocks"`
}

// TrainBlock places Repeat trains of Bunches filled slots, each followed by
// Gap empty slots.
type TrainBlock struct {
	Repeat  int `yaml:"repeat"`
	Bunches int `yaml:"bunches"`
	Gap     int `yaml:"gap"`
}

// FillingScheme lists the colliding slots of an orbit. It is immutable and
// safe for concurrent use.
type FillingScheme struct {
	Name      string
	colliding []uint32 // bcids of colliding slots, ascending
	filled    [SlotsPerOrbit]bool
}

// NewFillingScheme expands c into the list of colliding slots.
func NewFillingScheme(c FillingConfig) (*FillingScheme, error) {
	if c.Offset < 0 {
		return nil, fmt.Errorf("filling.offset = %d, want >= 0", c.Offset)
	}
	fs := &FillingScheme{Name: c.Name}
	slot := c.Offset
	for i, b := range c.Blocks {
		if b.Repeat < 0 || b.Bunches < 0 || b.Gap < 0 {
			return nil, fmt.Errorf("filling.blocks[%d]: repeat, bunches and gap must be >= 0", i)
		}
		for r := 0; r < b.Repeat; r++ {
			if slot+b.Bunches+b.Gap > SlotsPerOrbit {
				return nil, fmt.Errorf("filling.blocks[%d]: trains run past slot %d of the orbit", i, SlotsPerOrbit-1)
			}
			for k := 0; k < b.Bunches; k++ {
				fs.filled[slot] = true
				fs.colliding = append(fs.colliding, uint32(slot))
				slot++
			}
			slot += b.Gap
		}
	}
	if len(fs.colliding) == 0 {
		return nil, fmt.Errorf("filling %q has no colliding bunches", c.Name)
	}
	return fs, nil
}

// Colliding returns the number of colliding slots per orbit (n_b).
func (fs *FillingScheme) Colliding() int { return len(fs.colliding) }

// Collides reports whether slot bcid holds colliding bunches.
func (fs *FillingScheme) Collides(bcid uint32) bool {
	return bcid < SlotsPerOrbit && fs.filled[bcid]
}

// Crossing returns the orbit and bcid of the n-th colliding crossing of a
// run, counting from 0.
func (fs *FillingScheme) Crossing(n uint64) (orbit uint64, bcid uint32) {
	nb := uint64(len(fs.colliding))
	return n / nb, fs.colliding[n%nb]
}

// CrossingRateHz returns the colliding-crossing rate n_b * f_rev.
func (fs *FillingScheme) CrossingRateHz() float64 {
	return float64(len(fs.colliding)) * RevolutionHz
}
