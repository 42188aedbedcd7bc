package trigger

import (
	"math"
	"testing"
)

// metTowers are four towers whose sums are worked out by hand below. MET is
// minus the vector sum of tower E_T and sum ET the scalar sum (the
// definitions of the design's vocabulary, common practice).
func metTowers() *Event {
	return &Event{Towers: []Tower{
		{ET: 30, Eta: 0.05, Phi: 0},            // a
		{ET: 40, Eta: -1.25, Phi: math.Pi / 2}, // b
		{ET: 0.4, Eta: 0.35, Phi: math.Pi},     // c: below a 0.5 GeV noise cut
		{ET: 25, Eta: 4.5, Phi: math.Pi},       // d: outside |eta| <= 4
	}}
}

func TestMETAndSumET(t *testing.T) {
	cases := []struct {
		name                    string
		cfg                     FeatureConfig
		metx, mety, met, metPhi float64
		sumet                   float64
		used                    int
	}{
		// a + b: vector sum (30, 40), so MET = (-30, -40), |MET| = 50 (a
		// 3-4-5 triangle), phi = atan2(-40, -30) = -2.2142974 rad, sum ET =
		// 30 + 40 = 70.
		{"noise cut and eta range", FeatureConfig{NoiseCut: 0.5, EtaMax: 4}, -30, -40, 50, math.Atan2(-40, -30), 70, 2},
		// a + b + c: vector sum (30 - 0.4, 40); MET = sqrt(29.6^2 + 40^2) =
		// sqrt(2476.16) = 49.76102; sum ET 70.4.
		{"no noise cut", FeatureConfig{EtaMax: 4}, -29.6, -40, math.Sqrt(2476.16), math.Atan2(-40, -29.6), 70.4, 3},
		// a + b + d: vector sum (30 - 25, 40); MET = sqrt(5^2 + 40^2) =
		// sqrt(1625) = 40.31129; sum ET 95.
		{"no eta range", FeatureConfig{NoiseCut: 0.5}, -5, -40, math.Sqrt(1625), math.Atan2(-40, -5), 95, 3},
		// all four: vector sum (30 - 0.4 - 25, 40) = (4.6, 40); MET =
		// sqrt(21.16 + 1600) = 40.26363; sum ET 95.4.
		{"no selection", FeatureConfig{}, -4.6, -40, math.Sqrt(1621.16), math.Atan2(-40, -4.6), 95.4, 4},
		// |eta| >= 1 leaves b only: MET = (0, -40), phi = -pi/2, sum ET 40.
		{"eta_min", FeatureConfig{NoiseCut: 0.5, EtaMin: 1, EtaMax: 4}, 0, -40, 40, -math.Pi / 2, 40, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var f Features
			ComputeFeatures(metTowers(), c.cfg, &f)
			const tol = 1e-9
			if !near(f.METx, c.metx, tol) || !near(f.METy, c.mety, tol) {
				t.Errorf("MET vector (%v, %v), want (%v, %v)", f.METx, f.METy, c.metx, c.mety)
			}
			if !near(f.MET, c.met, tol) || !near(f.METPhi, c.metPhi, tol) {
				t.Errorf("MET %v at phi %v, want %v at %v", f.MET, f.METPhi, c.met, c.metPhi)
			}
			if !near(f.SumET, c.sumet, tol) || f.Used != c.used {
				t.Errorf("sum ET %v from %d towers, want %v from %d", f.SumET, f.Used, c.sumet, c.used)
			}
			if v, _ := f.Scalar("met"); v != f.MET {
				t.Errorf("Scalar(met) = %v, want %v", v, f.MET)
			}
		})
	}
}

func TestFeaturesIgnoreBadTowers(t *testing.T) {
	ev := &Event{Towers: []Tower{
		{ET: math.NaN(), Phi: 0},
		{ET: math.Inf(1), Phi: 0},
		{ET: 10, Eta: math.NaN()},
		{ET: 10, Phi: math.Inf(-1)},
		{ET: -3, Phi: 0}, // negative E_T is never used
		{ET: 12, Phi: 0},
	}}
	var f Features
	ComputeFeatures(ev, FeatureConfig{}, &f)
	if f.Bad != 4 || f.Used != 1 || f.SumET != 12 || f.MET != 12 {
		t.Fatalf("bad %d used %d sumET %v MET %v, want 4, 1, 12, 12", f.Bad, f.Used, f.SumET, f.MET)
	}
}

func TestEmptyEventHasZeroMETPhi(t *testing.T) {
	var f Features
	ComputeFeatures(&Event{}, FeatureConfig{}, &f)
	if f.MET != 0 || f.METPhi != 0 || math.Signbit(f.METx) {
		t.Fatalf("empty event: MET %v phi %v METx %v, want 0, 0, +0", f.MET, f.METPhi, f.METx)
	}
}

// A Features value reused for new events must not carry anything over.
func TestFeaturesReuse(t *testing.T) {
	g := lanternGrid()
	jets, _ := NewWindowFinder(WindowConfig{Seed: 5})
	cfg := FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "jets", Algorithm: jets}}}
	var f Features
	ComputeFeatures(&Event{Towers: []Tower{cellTower(g, 0, 40, 10, 50)}}, cfg, &f)
	if n := f.Collection("jets").Len(); n != 1 {
		t.Fatalf("first event: %d jets, want 1", n)
	}
	ComputeFeatures(&Event{Towers: []Tower{cellTower(g, 0, 20, 30, 7)}}, cfg, &f)
	c := f.Collection("jets")
	if c.Len() != 1 || c.At(0, 0) != 7 {
		t.Fatalf("second event: %d jets, first E_T %v; want one jet of 7 GeV", c.Len(), c.At(0, 0))
	}
	if ht, _ := f.Scalar("ht"); ht != 7 {
		t.Fatalf("HT %v, want 7", ht)
	}
}

// An eta bound written at a tower centre keeps the towers there on both
// sides: docs/menu.md says both bounds are inclusive, and the centres of
// the mirror rows 51 and 28 (|eta| = 1.15) come out of the grid's
// arithmetic as 1.1500000000000004 and 1.1499999999999999. Every centre
// from 0.05 to 3.95 is tried as eta_max and as eta_min.
func TestEtaBoundAtATowerCentreIsSymmetric(t *testing.T) {
	g := lanternGrid()
	for k := 0; k < g.EtaBins/2; k++ {
		plus, minus := g.EtaBins/2+k, g.EtaBins/2-1-k // mirror rows
		bound := 0.05 + 0.1*float64(k)
		ev := &Event{Towers: []Tower{cellTower(g, 0, plus, 3, 10), cellTower(g, 0, minus, 40, 10)}}
		for _, cfg := range []FeatureConfig{{Grid: g, EtaMax: bound}, {Grid: g, EtaMin: bound}} {
			var f Features
			ComputeFeatures(ev, cfg, &f)
			if f.SumET != 20 {
				t.Errorf("bound %.2f (eta_min %v, eta_max %v): sum ET %v of the towers at +-%.2f, want both (20 GeV)",
					bound, cfg.EtaMin, cfg.EtaMax, f.SumET, bound)
			}
		}
	}
}

// Huge finite energies are refused like infinite ones: two towers of 1e308
// GeV summed by hand overflow to +Inf, which would pass every threshold;
// they are counted bad and the event's MET and sum ET stay those of the
// sound towers. A tower just below MaxTowerET is used.
func TestHugeTowerEnergiesAreBad(t *testing.T) {
	g := lanternGrid()
	ev := &Event{Towers: []Tower{cellTower(g, 0, 40, 0, 1e308), cellTower(g, 0, 41, 32, 1e308), cellTower(g, 0, 42, 10, 50)},
		GridTowers: []GridTower{{IEta: 43, IPhi: 20, ET: 2e307}}}
	var f Features
	ComputeFeatures(ev, FeatureConfig{Grid: g}, &f)
	if f.Bad != 3 || f.SumET != 50 || f.MET != 50 {
		t.Errorf("bad %d, sum ET %v, MET %v; want 3 bad towers and 50 GeV from the sound one", f.Bad, f.SumET, f.MET)
	}
	ev = &Event{Towers: []Tower{cellTower(g, 0, 40, 0, 0.99*MaxTowerET)}}
	ComputeFeatures(ev, FeatureConfig{Grid: g}, &f)
	if f.Bad != 0 || f.SumET != 0.99*MaxTowerET {
		t.Errorf("a tower of %v GeV: bad %d, sum ET %v", 0.99*MaxTowerET, f.Bad, f.SumET)
	}
}
