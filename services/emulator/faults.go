package emulator

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
)

// Fault describes the readout faults injected into some sources. Fractions
// are per fragment, from 0 to 1; the zero value injects nothing.
type Fault struct {
	// Sources the fault applies to; empty means every source.
	Sources []uint32 `yaml:"sources"`
	// Drop is the fraction of fragments never sent.
	Drop float64 `yaml:"drop"`
	// Duplicate is the fraction of fragments sent twice in a row.
	Duplicate float64 `yaml:"duplicate"`
	// Corrupt is the fraction of fragments whose payload (or, when empty,
	// checksum) has one bit flipped after sealing.
	Corrupt float64 `yaml:"corrupt"`
	// Delay is the fraction of fragments held back DelayCrossings
	// crossings before they are sent.
	Delay          float64 `yaml:"delay"`
	DelayCrossings int     `yaml:"delay_crossings"`
	// Reorder is the fraction of fragments swapped with the previous one
	// of their batch.
	Reorder float64 `yaml:"reorder"`
	// StallFrom and StallTo stall the sources: crossings with StallFrom <=
	// n < StallTo are not sent at all. StallTo zero means no stall.
	StallFrom uint64 `yaml:"stall_from"`
	StallTo   uint64 `yaml:"stall_to"`
	// ClockSkewNs is added to the sources' timestamps.
	ClockSkewNs int64 `yaml:"clock_skew_ns"`
}

// Validate names the first setting out of range.
func (f Fault) Validate() error {
	for _, v := range []struct {
		name string
		x    float64
	}{{"drop", f.Drop}, {"duplicate", f.Duplicate}, {"corrupt", f.Corrupt}, {"delay", f.Delay}, {"reorder", f.Reorder}} {
		if !(v.x >= 0 && v.x <= 1) {
			return fmt.Errorf("emulator: fault %s = %v, want a fraction 0..1", v.name, v.x)
		}
	}
	if f.Drop+f.Duplicate+f.Corrupt+f.Delay > 1 {
		return fmt.Errorf("emulator: fault fractions drop+duplicate+corrupt+delay = %v exceed 1", f.Drop+f.Duplicate+f.Corrupt+f.Delay)
	}
	if f.DelayCrossings < 0 || (f.Delay > 0 && f.DelayCrossings == 0) {
		return fmt.Errorf("emulator: fault delay_crossings = %d, want > 0 with delay", f.DelayCrossings)
	}
	if f.StallTo != 0 && f.StallTo <= f.StallFrom {
		return fmt.Errorf("emulator: fault stall %d..%d is empty", f.StallFrom, f.StallTo)
	}
	return nil
}

// ParseFault reads the command-line form of a fault: comma-separated
// key=value pairs with the YAML keys, sources as ids joined by '+' or
// ranges a-b, stall as FROM-TO. Example:
//
//	sources=3+5-7,drop=0.05,duplicate=0.05,corrupt=0.01,stall=1000-5000
func ParseFault(spec string) (Fault, error) {
	var f Fault
	for _, kv := range strings.Split(spec, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(kv), "=")
		if !ok {
			return f, fmt.Errorf("emulator: fault %q: want key=value, found %q", spec, kv)
		}
		var err error
		switch k {
		case "sources":
			f.Sources, err = parseSources(v)
		case "drop":
			f.Drop, err = parseFraction(v)
		case "duplicate":
			f.Duplicate, err = parseFraction(v)
		case "corrupt":
			f.Corrupt, err = parseFraction(v)
		case "delay":
			f.Delay, err = parseFraction(v)
		case "reorder":
			f.Reorder, err = parseFraction(v)
		case "delay_crossings":
			f.DelayCrossings, err = strconv.Atoi(v)
		case "clock_skew_ns":
			f.ClockSkewNs, err = strconv.ParseInt(v, 10, 64)
		case "stall":
			a, b, ok := strings.Cut(v, "-")
			if !ok {
				return f, fmt.Errorf("emulator: fault stall=%q: want FROM-TO crossing numbers", v)
			}
			if f.StallFrom, err = strconv.ParseUint(a, 10, 64); err == nil {
				f.StallTo, err = strconv.ParseUint(b, 10, 64)
			}
		default:
			return f, fmt.Errorf("emulator: fault key %q unknown; keys are sources, drop, duplicate, corrupt, delay, delay_crossings, reorder, stall, clock_skew_ns", k)
		}
		if err != nil {
			return f, fmt.Errorf("emulator: fault %s=%q: %v", k, v, err)
		}
	}
	if f.Delay > 0 && f.DelayCrossings == 0 {
		f.DelayCrossings = 16
	}
	return f, f.Validate()
}

func parseFraction(v string) (float64, error) {
	x, err := strconv.ParseFloat(v, 64)
	if err != nil || math.IsNaN(x) {
		return 0, fmt.Errorf("want a fraction 0..1")
	}
	return x, nil
}

func parseSources(v string) ([]uint32, error) {
	var ids []uint32
	for _, part := range strings.Split(v, "+") {
		a, b, isRange := strings.Cut(part, "-")
		lo, err := strconv.ParseUint(a, 10, 32)
		if err != nil || lo == 0 {
			return nil, fmt.Errorf("want source ids >= 1 joined by '+' or ranges a-b")
		}
		hi := lo
		if isRange {
			if hi, err = strconv.ParseUint(b, 10, 32); err != nil || hi < lo || hi-lo > 4096 {
				return nil, fmt.Errorf("bad source range %q", part)
			}
		}
		for id := lo; id <= hi; id++ {
			ids = append(ids, uint32(id))
		}
	}
	return ids, nil
}

// action is what happens to one fragment.
type action int

const (
	send action = iota
	drop
	duplicate
	corrupt
	delay
)

// injector applies faults deterministically: the decision for a fragment
// depends only on the seed, the crossing number and the source.
type injector struct {
	seed   uint64
	per    map[uint32]*Fault // source -> merged fault
	src    *rand.PCG
	rng    *rand.Rand
	counts InjectedCounts
}

// InjectedCounts says what the injector did, per kind.
type InjectedCounts struct {
	Dropped, Duplicated, Corrupted, Delayed, Reordered, Stalled uint64
}

func newInjector(seed uint64, faults []Fault, sources []uint32) (*injector, error) {
	if len(faults) == 0 {
		return nil, nil
	}
	inj := &injector{seed: seed ^ 0x5eed_fa17, per: map[uint32]*Fault{}}
	inj.src = rand.NewPCG(0, 0)
	inj.rng = rand.New(inj.src)
	known := map[uint32]bool{}
	for _, id := range sources {
		known[id] = true
	}
	for i := range faults {
		f := faults[i]
		if err := f.Validate(); err != nil {
			return nil, err
		}
		targets := f.Sources
		if len(targets) == 0 {
			targets = sources
		}
		for _, id := range targets {
			if !known[id] {
				return nil, fmt.Errorf("emulator: fault names source %d, which this emulator does not run", id)
			}
			if inj.per[id] != nil {
				return nil, fmt.Errorf("emulator: source %d has more than one fault entry", id)
			}
			inj.per[id] = &f
		}
	}
	return inj, nil
}

func (inj *injector) fault(source uint32) *Fault {
	if inj == nil {
		return nil
	}
	return inj.per[source]
}

// decide draws the action for the fragment of source in crossing n.
func (inj *injector) decide(f *Fault, n uint64, source uint32) (action, bool) {
	inj.src.Seed(inj.seed^n*0x9e3779b97f4a7c15, uint64(source)+1)
	u := inj.rng.Float64()
	reorder := inj.rng.Float64() < f.Reorder
	switch {
	case u < f.Drop:
		return drop, reorder
	case u < f.Drop+f.Duplicate:
		return duplicate, reorder
	case u < f.Drop+f.Duplicate+f.Corrupt:
		return corrupt, reorder
	case u < f.Drop+f.Duplicate+f.Corrupt+f.Delay:
		return delay, reorder
	}
	return send, reorder
}
