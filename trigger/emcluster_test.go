package trigger

import (
	"math"
	"testing"
)

func emCollection(t *testing.T, cfg EMClusterConfig, ev *Event) *Collection {
	t.Helper()
	f, err := NewEMClusterFinder(cfg)
	if err != nil {
		t.Fatal(err)
	}
	var feats Features
	ComputeFeatures(ev, FeatureConfig{Grid: lanternGrid(), Collections: []CollectionConfig{{Name: "ems", Algorithm: f}}}, &feats)
	return feats.Collection("ems")
}

// TestEMClusterWorked checks a cluster worked out by hand. EM cells: 40 GeV
// at (ieta 40, iphi 10), 8 at (41, 10), 2 at (40, 11), 1 at (41, 11), and
// in the 5x5 around the seed 3 at (38, 10) and 0.5 at (42, 12); hadronic
// 1 GeV at (40, 10) and 6 at (43, 10), outside the 3x3.
//
//   - The best 2x2 holding the seed is rows 40-41, columns 10-11:
//     40 + 8 + 2 + 1 = 51 GeV (the other three squares hold 40 or 48).
//   - eta = (42 * 0.05 + 9 * 0.15) / 51 = 0.0676471 (cell centres -4 +
//     (ieta + 0.5) 0.1); phi = centre of column 10 + 3/51 of a column.
//   - iso = (3 + 0.5 + 1) / 51 = 0.0882353: the EM ring and the hadronic
//     3x3; the hadronic 6 GeV lies outside.
func TestEMClusterWorked(t *testing.T) {
	g := lanternGrid()
	ev := &Event{Towers: []Tower{
		cellTower(g, 0, 40, 10, 40), cellTower(g, 0, 41, 10, 8), cellTower(g, 0, 40, 11, 2), cellTower(g, 0, 41, 11, 1),
		cellTower(g, 0, 38, 10, 3), cellTower(g, 0, 42, 12, 0.5),
		cellTower(g, 1, 40, 10, 1), cellTower(g, 1, 43, 10, 6),
	}}
	c := emCollection(t, EMClusterConfig{Seed: 2}, ev)
	if c.Len() != 2 {
		t.Fatalf("%d clusters, want 2 (the seed and the 3 GeV cell)", c.Len())
	}
	et, _ := c.Value(0, "et")
	eta, _ := c.Value(0, "eta")
	phi, _ := c.Value(0, "phi")
	iso, _ := c.Value(0, "iso")
	if !near(et, 51, 1e-12) || !near(eta, 0.0676471, 5e-7) || !near(phi, g.PhiCentre(10)+3.0/51*g.PhiStep(), 1e-12) || !near(iso, 0.0882353, 5e-7) {
		t.Errorf("cluster et %v eta %v phi %v iso %v", et, eta, phi, iso)
	}
	// The 3 GeV cell at (38, 10) is a seed of its own; the 0.5 GeV one is
	// below the seed threshold.
	if et, _ := c.Value(1, "et"); et != 3 {
		t.Errorf("second cluster et %v, want 3", et)
	}
	// With a 3x3 ring the 3 GeV and 0.5 GeV cells drop out of the ring.
	c = emCollection(t, EMClusterConfig{Seed: 2, Ring: 1}, ev)
	if iso, _ := c.Value(0, "iso"); !near(iso, 1.0/51, 1e-12) {
		t.Errorf("ring 1: iso %v, want 1/51", iso)
	}
	// MinET drops the small cluster.
	if c := emCollection(t, EMClusterConfig{Seed: 2, MinET: 10}, ev); c.Len() != 1 {
		t.Errorf("min_et 10 GeV: %d clusters", c.Len())
	}
}

// TestEMClusterEdges: equal neighbours make one cluster, the phi seam
// wraps, the eta edge counts as empty, and a hadronic deposit behind an EM
// one makes it non-isolated.
func TestEMClusterEdges(t *testing.T) {
	g := lanternGrid()
	ev := &Event{Towers: []Tower{
		cellTower(g, 0, 20, 0, 10), cellTower(g, 0, 20, 63, 10), // across the seam, equal
		cellTower(g, 0, 0, 30, 12), cellTower(g, 0, 1, 30, 1), // at the eta edge
		cellTower(g, 0, 60, 40, 20), cellTower(g, 1, 60, 40, 30), cellTower(g, 1, 61, 41, 10), // inside a jet
	}}
	c := emCollection(t, EMClusterConfig{Seed: 1}, ev)
	if c.Len() != 3 {
		t.Fatalf("%d clusters, want 3", c.Len())
	}
	byEta := map[int]int{}
	for i := 0; i < c.Len(); i++ {
		eta, _ := c.Value(i, "eta")
		byEta[int(math.Floor((eta+4)/0.1))] = i
	}
	seam := byEta[20]
	if et, _ := c.Value(seam, "et"); et != 20 {
		t.Errorf("seam cluster et %v, want 20", et)
	}
	// Halfway between the centres of columns 63 and 0: phi = pi or -pi.
	if phi, _ := c.Value(seam, "phi"); !near(math.Abs(phi), math.Pi, 1e-12) {
		t.Errorf("seam cluster phi %v, want +-pi", phi)
	}
	if et, _ := c.Value(byEta[0], "et"); et != 13 {
		t.Errorf("edge cluster et %v, want 13", et)
	}
	if iso, _ := c.Value(byEta[60], "iso"); !near(iso, 2, 1e-12) {
		t.Errorf("cluster in a jet: iso %v, want (30 + 10) / 20 = 2", iso)
	}
}

func TestNewEMClusterFinderChecks(t *testing.T) {
	for _, cfg := range []EMClusterConfig{{Seed: -1}, {MinET: math.NaN()}, {Ring: 4}, {Ring: -1}} {
		if _, err := NewEMClusterFinder(cfg); err == nil {
			t.Errorf("%+v accepted", cfg)
		}
	}
	f, _ := NewEMClusterFinder(EMClusterConfig{Ring: 3})
	if err := f.ValidateGrid(Grid{EtaBins: 10, PhiBins: 6, EtaStep: 0.1}); err == nil {
		t.Error("a 7x7 ring on 6 phi bins accepted")
	}
}
