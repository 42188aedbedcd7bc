package trigger

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

func antiKtCollection(t *testing.T, cfg AntiKtConfig, g Grid, ev *Event) *Features {
	t.Helper()
	f, err := NewAntiKtFinder(cfg)
	if err != nil {
		t.Fatal(err)
	}
	feats := &Features{}
	ComputeFeatures(ev, FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "jets", Algorithm: f}}}, feats)
	return feats
}

// TestAntiKtFinderTowersMatchReference runs the finder on towers at
// arbitrary positions and compares its jets with go-hep's fastjet
// (v0.36.0) on the same massless four-vectors.
func TestAntiKtFinderTowersMatchReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 1))
	for ev := 0; ev < 12; ev++ {
		ps := towerInputs(rng, 20+rng.IntN(150), false)
		e := &Event{}
		for _, p := range ps {
			e.Towers = append(e.Towers, Tower{Layer: uint8(rng.IntN(2)), IEta: -1, Eta: p.Eta(), Phi: wrapPhi(p.Phi()), ET: p.Pt()})
		}
		feats := antiKtCollection(t, AntiKtConfig{Radius: 0.4, Towers: true, MinET: 5}, Grid{}, e)
		c := feats.Collection("jets")
		want, _ := referenceJets(t, ps, 0.4)
		var kept []FourMomentum
		for _, w := range want {
			if w.ET() >= 5 {
				kept = append(kept, w)
			}
		}
		slices.SortStableFunc(kept, func(a, b FourMomentum) int { return cmpFloat(b.ET(), a.ET()) })
		if c.Len() != len(kept) {
			t.Fatalf("event %d: %d jets, reference %d", ev, c.Len(), len(kept))
		}
		var ht float64
		for i, w := range kept {
			row := map[string]float64{"et": w.ET(), "pt": w.Pt(), "eta": w.Eta(), "y": w.Rapidity(), "phi": wrapPhi(w.Phi()), "m": math.Sqrt(max(w.M2(), 0))}
			for name, x := range row {
				v, _ := c.Value(i, name)
				tol := 1e-9 * max(1, math.Abs(x))
				if name == "m" {
					tol = 1e-7 * w.E // a massless input's m^2 is rounding, of order 1e-16 E^2
				}
				if !near(v, x, tol) {
					t.Fatalf("event %d jet %d: %s %v, reference %v", ev, i, name, v, x)
				}
			}
			ht += w.ET()
		}
		if got, _ := feats.Scalar("ht"); !near(got, ht, 1e-9*max(1, ht)) {
			t.Fatalf("event %d: HT %v, reference %v", ev, got, ht)
		}
	}
}

// TestAntiKtFinderCells: on the grid the cells (both layers added) are
// clustered; with one tower per cell that is the same as clustering the
// towers. An isolated hard cell gathers every cell within R of it and none
// beyond: the conical jet of the anti-kt paper (Cacciari, Salam, Soyez,
// JHEP 04 (2008) 063, sec. 2).
func TestAntiKtFinderCells(t *testing.T) {
	g := lanternGrid()
	rng := rand.New(rand.NewPCG(4, 4))
	ev := syntheticEvent(rng, g, 300, 1)
	// One tower per cell for the comparison: keep the first of each.
	seen := map[int]bool{}
	var one []Tower
	for _, tw := range ev.Towers {
		if c := tw.IEta*g.PhiBins + tw.IPhi; !seen[c] {
			seen[c] = true
			one = append(one, tw)
		}
	}
	single := &Event{Towers: one}
	cells := antiKtCollection(t, AntiKtConfig{InputMinET: 1}, g, single).Collection("jets")
	towers := antiKtCollection(t, AntiKtConfig{InputMinET: 1, Towers: true}, g, single).Collection("jets")
	if cells.Len() == 0 || !slices.Equal(cells.vals, towers.vals) {
		t.Fatalf("cells give %d jets, towers %d; values differ", cells.Len(), towers.Len())
	}

	// The cone: 100 GeV at (40, 32); 1 GeV cells around it at distances
	// below and above R = 0.4. The jet holds exactly those within R.
	hard := []Tower{cellTower(g, 0, 40, 32, 70), cellTower(g, 1, 40, 32, 30)}
	inside := 0.0
	sum := PtEtaPhi(100, g.EtaCentre(40), g.PhiCentre(32))
	for de := -6; de <= 6; de++ {
		for dp := -6; dp <= 6; dp++ {
			if de == 0 && dp == 0 {
				continue
			}
			d := math.Hypot(float64(de)*g.EtaStep, float64(dp)*g.PhiStep())
			if math.Abs(d-0.4) < 0.02 {
				continue // too close to the edge to call
			}
			tw := cellTower(g, 1, 40+de, 32+dp, 1)
			hard = append(hard, tw)
			if d < 0.4 {
				inside++
				sum = sum.Add(PtEtaPhi(1, tw.Eta, tw.Phi))
			}
		}
	}
	feats := antiKtCollection(t, AntiKtConfig{}, g, &Event{Towers: hard})
	c := feats.Collection("jets")
	n, _ := c.Value(0, "n")
	pt, _ := c.Value(0, "pt")
	m, _ := c.Value(0, "m")
	if n != 1+inside || inside < 20 {
		t.Errorf("cone of %v inputs, want %v", n, 1+inside)
	}
	if !near(pt, sum.Pt(), 1e-9) || !near(m, sum.M(), 1e-7) {
		t.Errorf("cone pT %v m %v, want the sum of the cells in it: %v, %v", pt, m, sum.Pt(), sum.M())
	}
}

func TestAntiKtFinderConfig(t *testing.T) {
	for _, cfg := range []AntiKtConfig{{Radius: -0.4}, {Radius: 2}, {Radius: math.NaN()}, {MinET: -1}, {InputMinET: math.Inf(1)}} {
		if _, err := NewAntiKtFinder(cfg); err == nil {
			t.Errorf("%+v accepted", cfg)
		}
	}
	f, _ := NewAntiKtFinder(AntiKtConfig{})
	if c := f.Config(); c.Radius != 0.4 || c.HTName != "ht" {
		t.Errorf("defaults %+v", c)
	}
	if f.ValidateGrid(Grid{}) == nil {
		t.Error("cells need a grid")
	}
	f, _ = NewAntiKtFinder(AntiKtConfig{Towers: true})
	if f.ValidateGrid(Grid{}) != nil {
		t.Error("towers need no grid")
	}
}
