package trigger

import (
	"math"
	"testing"
)

// TestNarrowCluster checks a narrow and a wide deposit worked out by hand.
// Narrow, at (30, 20): 30 GeV EM + 10 GeV hadronic in the seed, 5 GeV
// hadronic at (31, 20), 1 GeV at (32, 22): core rows 30-31, columns
// 19-20 (the first of the two squares holding 45 GeV), et = 45, iso = 1/45,
// em_frac = 30/45. Wide, at (60, 40): 20 GeV in the seed and 8 GeV in each
// of its 8 neighbours (hadronic): the core holds 20 + 3 * 8 = 44 GeV, the
// rest of the 3x3 is 5 * 8 = 40, iso = 40/44.
func TestNarrowCluster(t *testing.T) {
	g := lanternGrid()
	ev := &Event{Towers: []Tower{
		cellTower(g, 0, 30, 20, 30), cellTower(g, 1, 30, 20, 10), cellTower(g, 1, 31, 20, 5), cellTower(g, 1, 32, 22, 1),
		cellTower(g, 1, 60, 40, 20),
	}}
	for de := -1; de <= 1; de++ {
		for dp := -1; dp <= 1; dp++ {
			if de != 0 || dp != 0 {
				ev.Towers = append(ev.Towers, cellTower(g, 1, 60+de, 40+dp, 8))
			}
		}
	}
	f, err := NewNarrowFinder(NarrowConfig{Seed: 10})
	if err != nil {
		t.Fatal(err)
	}
	var feats Features
	ComputeFeatures(ev, FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "taus", Algorithm: f}}}, &feats)
	c := feats.Collection("taus")
	if c.Len() != 2 {
		t.Fatalf("%d clusters, want 2", c.Len())
	}
	get := func(i int, name string) float64 {
		v, ok := c.Value(i, name)
		if !ok {
			t.Fatalf("no field %s", name)
		}
		return v
	}
	if et := get(0, "et"); et != 45 {
		t.Errorf("narrow et %v, want 45", et)
	}
	if iso, em := get(0, "iso"), get(0, "em_frac"); !near(iso, 1.0/45, 1e-12) || !near(em, 30.0/45, 1e-12) {
		t.Errorf("narrow iso %v em_frac %v, want 1/45 and 2/3", iso, em)
	}
	if eta := get(0, "eta"); !near(eta, (40*g.EtaCentre(30)+5*g.EtaCentre(31))/45, 1e-12) {
		t.Errorf("narrow eta %v", eta)
	}
	if et, iso := get(1, "et"), get(1, "iso"); et != 44 || !near(iso, 40.0/44, 1e-12) {
		t.Errorf("wide et %v iso %v, want 44 and 40/44", et, iso)
	}
	if em := get(1, "em_frac"); em != 0 {
		t.Errorf("wide em_frac %v, want 0", em)
	}
	// A rule picks the narrow one only.
	s := mustSelector(t, mustParse(t, "menu: m\nversion: 1\nfeatures:\n  taus: {finder: narrow-cluster, seed: 10 GeV, min_et: 20 GeV}\nrules:\n  narrow-40: {when: \"count(taus, et > 40 GeV and iso < 0.2) == 1\"}\n  wide: {when: \"count(taus, iso > 0.5) == 1\"}\n"))
	var d Decision
	s.Decide(ev, &d)
	if !d.Passed[0] || !d.Passed[1] {
		t.Errorf("passed %v, want both", d.Passed)
	}
	for _, cfg := range []NarrowConfig{{Seed: -1}, {MinET: math.Inf(1)}, {Ring: 5}} {
		if _, err := NewNarrowFinder(cfg); err == nil {
			t.Errorf("%+v accepted", cfg)
		}
	}
}
