package trigger

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
)

const physicsMenuPath = "../examples/menus/lantern-physics.yaml"

// lanternGeometryGrid is the Grid of the detector package's built-in
// Lantern geometry, as the selection service builds it.
func lanternGeometryGrid(g *detector.Geometry) Grid {
	return Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep, FieldT: g.FieldT}
}

// physicsEvents generates n crossings of the Lantern detector with the
// detector package's physics generator at pile-up mu (force: a process in
// every crossing, "" for the natural mix) and converts them to Events:
// towers at their cell centres with E_T from the least counts, muon hits
// in mm. It returns the truth of each crossing too.
func physicsEvents(t testing.TB, n int, mu float64, force string, seed uint64) ([]*Event, []detector.Truth) {
	t.Helper()
	return physicsEventsWith(t, n, detector.PhysicsConfig{Mu: mu, Force: force, LibraryEvents: 300}, seed)
}

// physicsEventsWith is physicsEvents with every generator setting given.
func physicsEventsWith(t testing.TB, n int, cfg detector.PhysicsConfig, seed uint64) ([]*Event, []detector.Truth) {
	t.Helper()
	d := detector.DefaultDescription()
	geo := d.Geometry
	part, err := detector.NewPartition(geo, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, seed, cfg)
	if err != nil {
		t.Fatal(err)
	}
	var c detector.Crossing
	evs := make([]*Event, n)
	truth := make([]detector.Truth, n)
	for i := range evs {
		gen.Generate(uint64(i), &c)
		ev := &Event{LumiSlice: 1 + uint32(i/64)}
		for _, src := range c.PerSource {
			for _, tc := range src {
				layer, ieta, iphi, ok := geo.TowerCoords(int(tc.Tower))
				if !ok || tc.Counts == 0 {
					continue
				}
				ev.Towers = append(ev.Towers, Tower{Layer: uint8(layer), IEta: ieta, IPhi: iphi, Eta: geo.EtaCentre(ieta), Phi: geo.PhiCentre(iphi), ET: geo.ET(tc.Counts)})
			}
		}
		for _, hits := range c.MuonHits {
			for _, h := range hits {
				ev.MuonHits = append(ev.MuonHits, MuonHit{Station: h.Station, X: h.X, Y: h.Y, Z: h.Z})
			}
		}
		evs[i] = ev
		truth[i] = c.Truth
		truth[i].Objects = append([]detector.TruthObject(nil), c.Truth.Objects...)
	}
	return evs, truth
}

// denseEvent returns a crossing heavier than the generator's mu = 60 ones
// (about 900 towers): n towers of soft deposits over the whole grid, with
// E_T = 0.5 GeV + an exponential of mean 0.45 GeV (so that, as in the
// generator's crossings, about a third of them pass 1 GeV and 4% pass
// 2 GeV), two to six hard sprays, two isolated electromagnetic deposits
// and two muons with their station hits.
func denseEvent(rng *rand.Rand, g Grid, n int, slice uint32) *Event {
	ev := &Event{LumiSlice: slice}
	for range n {
		ev.Towers = append(ev.Towers, cellTower(g, uint8(rng.IntN(2)), rng.IntN(g.EtaBins), rng.IntN(g.PhiBins), 0.5+0.45*rng.ExpFloat64()))
	}
	for k := 0; k < 2; k++ {
		ieta, iphi := 20+rng.IntN(40), rng.IntN(g.PhiBins)
		et := 20 + rng.ExpFloat64()*20
		ev.Towers = append(ev.Towers, cellTower(g, 0, ieta, iphi, 0.8*et), cellTower(g, 0, ieta+1, iphi, 0.2*et))
	}
	for k := 0; k < 2+rng.IntN(5); k++ {
		ieta, iphi := 5+rng.IntN(g.EtaBins-10), rng.IntN(g.PhiBins)
		core := 30 + rng.ExpFloat64()*100
		for de := -2; de <= 2; de++ {
			for dp := -2; dp <= 2; dp++ {
				share := 0.3 * math.Exp(-float64(de*de+dp*dp))
				ev.Towers = append(ev.Towers, cellTower(g, uint8(rng.IntN(2)), ieta+de, (iphi+dp+g.PhiBins)%g.PhiBins, core*share))
			}
		}
	}
	addMuons(rng, ev, 2)
	return ev
}
