package trigger

import (
	"math"
	"testing"
)

// TestCrossCollectionExpressions evaluates multiplicities, invariant
// masses and angular separations between objects of different
// collections on one event worked out by hand:
//
//   - an isolated electromagnetic deposit of 40 GeV in cell (40, 10)
//     (eta 0.05, phi at the centre of column 10);
//   - a hadronic deposit of 100 GeV in cell (45, 42), a jet of its own;
//   - a muon of 30 GeV, charge -1, from the beam line at eta 0.05, with
//     phi = phi(column 10) + pi.
//
// dr(ems[0], jets[0]) = hypot(0.5, 32 columns) = hypot(0.5, pi) = 3.18113;
// the EM cluster and the muon are back to back at equal eta, so
// M^2 = 2 * 40 * 30 * (cosh 0 - cos pi) = 4800, M = 69.282 GeV (PDG
// "Kinematics").
func TestCrossCollectionExpressions(t *testing.T) {
	g := lanternGrid()
	m := mustParse(t, `menu: x
version: 1
features:
  jets:  {finder: antikt, radius: 0.4, min_et: 20 GeV}
  ems:   {finder: em-cluster, seed: 5 GeV}
  muons: {finder: muon-road}
rules:
  dr-em-jet:    {when: "dr(ems[0], jets[0]) in 3.181 .. 3.182"}
  mass-em-mu:   {when: "mass(ems[0], muons[0]) in 69.28 GeV .. 69.29 GeV"}
  dphi-em-mu:   {when: "dphi(ems[0], muons[0]) > 3.14159"}
  counts:       {when: "count(jets) == 2 and count(ems, iso < 0.01) == 1 and count(muons, charge == -1) == 1"}
  jet-ht:       {when: "ht in 139.99 GeV .. 140.01 GeV"}
  mu-pt-ratio:  {when: "muons[0].pt / jets[0].et in 0.2999 .. 0.3001"}
  no-third:     {when: "not jets[2].et > 0 GeV and not dr(ems[1], jets[0]) > 0 and dr(ems[0], jets[1]) < 1e-9"}
`)
	s := mustSelector(t, m)
	phi10 := g.PhiCentre(10)
	ev := &Event{LumiSlice: 1, Towers: []Tower{
		cellTower(g, 0, 40, 10, 40),
		cellTower(g, 1, 45, 42, 100),
	}}
	ev.MuonHits = helixHits(30, g.EtaCentre(40), wrapPhi(phi10+math.Pi), -1, 0, 3, lanternStations)
	var d Decision
	s.Decide(ev, &d)
	for i, r := range m.Rules {
		if !d.Passed[i] {
			t.Errorf("rule %s (%s) did not pass", r.Name, r.When)
		}
	}
	// The two jets: the 100 GeV cell and the 40 GeV EM cell, each alone;
	// one EM cluster.
	var f Features
	s.ComputeFeatures(ev, &f)
	if dr := DeltaR(f.Collection("ems").At(0, 1), f.Collection("ems").At(0, 2), f.Collection("jets").At(0, 2), f.Collection("jets").At(0, 4)); !near(dr, 3.18113, 5e-6) {
		t.Errorf("dr %v, want hypot(0.5, pi) = 3.18113", dr)
	}
}
