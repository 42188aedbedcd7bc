package web_test

import (
	"math"
	"sync/atomic"

	"github.com/bunchsieve/bunchsieve/services/web"
)

// fakeRun is a Source whose numbers move with every call, so that a page
// polling it must show changing rates. Safe for concurrent use.
type fakeRun struct {
	calls atomic.Uint64
}

var fakeRules = []struct {
	name     string
	prescale int
	passHz   float64
}{
	{"met-120", 1, 2.4},
	{"sumet-900", 10, 31},
	{"two-jets-80", 1, 0.6},
	{"jet-met-60", 1, 7.7},
	{"dijet-mass-500", 0, 0.4},
	{"random-keep", 1000, 5000},
}

func (f *fakeRun) Snapshot() web.Snapshot {
	n := float64(f.calls.Add(1))
	wobble := 1 + 0.35*math.Sin(n/1.7) // changes at every call
	s := web.Snapshot{
		Phase: web.PhaseFlowing, Detail: "run 416 ended: 90000 crossings", Run: 417, LumiSlice: 3 + uint32(n/20), PrescaleSet: "nominal",
		Menu: "lantern-starter", MenuHash: "5c6cab9fe4ed60f1", UptimeS: 61 + n,
		CrossingsHz: 5000 * (1 + 0.02*math.Sin(n)), BuiltHz: 4990 * (1 + 0.02*math.Sin(n)),
		IncompleteFraction: 0.004 * wobble,
		BuildLatencyP50S:   320e-6, BuildLatencyP90S: 900e-6 * wobble, BuildLatencyP99S: 2.1e-3 * wobble,
		EndToEndP99S: 3.8e-3 * wobble,
	}
	for i, r := range fakeRules {
		acc := 0.0
		if r.prescale > 0 {
			acc = r.passHz * wobble / float64(r.prescale)
		}
		s.Rules = append(s.Rules, web.RuleStatus{
			Name: r.name, Prescale: r.prescale, PassedHz: r.passHz * wobble, AcceptedHz: acc,
			Passed: uint64(r.passHz * 60 * n), Accepted: uint64(acc * 60 * n), // rough totals
		})
		s.AcceptedHz += acc * (1 - 0.05*float64(i%2)) // overlaps make the menu total less than the sum
	}
	for id := uint32(1); id <= 16; id++ {
		src := web.SourceHealth{ID: id, Alive: id != 7, Received: uint64(5000 * n)}
		if id == 7 {
			src.Received = 120000
		}
		if id == 11 {
			src.Discarded = 42
		}
		s.Sources = append(s.Sources, src)
	}
	return s
}
