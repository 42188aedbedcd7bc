package detector

import (
	"fmt"
	"math"
)

// Machine constants of a ring with 25 ns bunch spacing. The values are the
// design figures of a 26.7 km collider (LHC Design Report vol. I,
// CERN-2004-003, from memory): 3564 bunch slots per orbit and a revolution
// frequency of 11.2455 kHz, so one slot lasts 1/(3564 f_rev) = 24.95 ns.
const (
	// SlotsPerOrbit is the number of 25 ns bunch slots in one orbit.
	SlotsPerOrbit = 3564
	// RevolutionHz is the orbit frequency f_rev.
	RevolutionHz = 11245.5
)

// Clock converts between bunch counters and time. The zero value is not
// usable; use NewClock or DefaultClock.
type Clock struct {
	// Slots is the number of bunch slots per orbit.
	Slots int
	// SlotNs is the length of one slot in ns.
	SlotNs float64
	// PhaseNs is the offset of slot 0 of orbit 0 from the run start, in ns.
	PhaseNs float64
}

// DefaultClock returns the clock of a 3564-slot ring at 11.2455 kHz.
func DefaultClock() Clock {
	return Clock{Slots: SlotsPerOrbit, SlotNs: 1e9 / (SlotsPerOrbit * RevolutionHz)}
}

// Validate reports a clock that cannot number crossings.
func (c Clock) Validate() error {
	if c.Slots <= 0 {
		return fmt.Errorf("detector: clock has %d slots per orbit, want > 0", c.Slots)
	}
	if !(c.SlotNs > 0) || math.IsInf(c.SlotNs, 0) {
		return fmt.Errorf("detector: clock slot length %v ns, want a finite value > 0", c.SlotNs)
	}
	return nil
}

// SlotIndex returns the absolute slot number orbit*Slots + bcid.
func (c Clock) SlotIndex(orbit uint64, bcid uint32) uint64 {
	return orbit*uint64(c.Slots) + uint64(bcid)
}

// Nominal returns the nominal time of crossing (orbit, bcid) in ns from run
// start, rounded to the nearest ns.
func (c Clock) Nominal(orbit uint64, bcid uint32) int64 {
	return int64(math.Round(float64(c.SlotIndex(orbit, bcid))*c.SlotNs + c.PhaseNs))
}

// OrbitNs returns the length of one orbit in ns.
func (c Clock) OrbitNs() float64 { return float64(c.Slots) * c.SlotNs }
