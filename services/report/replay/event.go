package replay

import (
	"math"

	"github.com/bunchsieve/bunchsieve/services/recording"
)

// Event is one decided event as the sink sees it. It and its slices are
// valid only during the sink call.
type Event struct {
	// Seq numbers the events from 0 in the order the builder emitted them.
	Seq   uint64
	Run   uint32
	Orbit uint64
	Bcid  uint32
	// LumiSlice is orbit / lumi_slice_orbits + 1, as the assembler numbers
	// slices.
	LumiSlice uint32
	// Flags is the builder's OR of pb.EventFlag bits; Missing the number
	// of expected sources that did not report.
	Flags   uint32
	Missing int
	// Towers is the number of towers decoded from the fragments.
	Towers int
	// Truth is the generator truth of the crossing, or nil.
	Truth *recording.TruthRecord
	// Passed[m][i] reports whether rule i of menu m passed, before
	// prescale; Kept[m][i] whether it kept the event after prescale;
	// Accept[m] whether menu m kept it by any rule.
	Passed, Kept [][]bool
	Accept       []bool
	// Values holds Config.Values in order, from the first menu's
	// features: NaN where the event has none.
	Values []float64
}

// Weight returns the event's weight: the truth record's weight when it
// carries one, else 1. A truth record with weight zero, no hard process
// and process minbias is one whose generator sets no weights (the toy
// generator), and weighs 1 too.
func (e *Event) Weight() float64 {
	t := e.Truth
	if t == nil {
		return 1
	}
	w := t.Truth.Weight
	if w == 0 && len(t.Truth.Hard) == 0 && t.Truth.Process == 0 {
		return 1
	}
	if math.IsNaN(w) || math.IsInf(w, 0) {
		return 0
	}
	return w
}
