package trigger

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// toGridTowers returns ev with every tower that sits exactly at the centre
// of its grid cell given as a GridTower, the rest left as Towers, and the
// order of the features' input kept: the towers of an Event are Towers
// then GridTowers, so only a trailing run of cell-centred towers moves.
func toGridTowers(ev *Event, g Grid) *Event {
	out := &Event{MuonHits: ev.MuonHits, LumiSlice: ev.LumiSlice}
	k := len(ev.Towers)
	for k > 0 {
		t := ev.Towers[k-1]
		if t.IEta < 0 || t.IPhi < 0 || t.IEta > math.MaxUint16 || t.IPhi > math.MaxUint16 ||
			t.Eta != g.EtaCentre(t.IEta) || t.Phi != g.PhiCentre(t.IPhi) {
			break
		}
		k--
	}
	out.Towers = ev.Towers[:k]
	for _, t := range ev.Towers[k:] {
		out.GridTowers = append(out.GridTowers, GridTower{ET: t.ET, IEta: uint16(t.IEta), IPhi: uint16(t.IPhi), Layer: t.Layer})
	}
	return out
}

// expandGridTowers returns ev with its GridTowers written out as the
// Towers they stand for (the definition in the GridTower comment).
func expandGridTowers(ev *Event, g Grid) *Event {
	out := &Event{MuonHits: ev.MuonHits, LumiSlice: ev.LumiSlice}
	for i := range ev.NumTowers() {
		out.Towers = append(out.Towers, ev.TowerAt(i, g))
	}
	return out
}

// sameFeatures reports whether two Features hold the same values, bit for
// bit (NaN equals NaN), and which differs.
func sameFeatures(a, b *Features) (string, bool) {
	bits := func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) }
	sameVals := func(x, y []float64) bool { return slices.EqualFunc(x, y, bits) }
	switch {
	case !sameVals([]float64{a.METx, a.METy, a.MET, a.METPhi, a.SumET}, []float64{b.METx, b.METy, b.MET, b.METPhi, b.SumET}):
		return "MET or sum ET", false
	case a.Used != b.Used || a.Bad != b.Bad || a.OffGrid != b.OffGrid:
		return "tower counts", false
	case !sameVals(a.scalars, b.scalars):
		return "scalars", false
	case len(a.colls) != len(b.colls):
		return "collections", false
	}
	for i := range a.colls {
		if !sameVals(a.colls[i].vals, b.colls[i].vals) {
			return "collection " + a.colls[i].name, false
		}
	}
	if !slices.Equal(a.in.Touched, b.in.Touched) || !slices.Equal(a.in.Hot, b.in.Hot) || !slices.Equal(a.in.Selected, b.in.Selected) {
		return "cell lists", false
	}
	return "", true
}

// The features and decisions of an event are the same whether its
// cell-centred towers come as Towers or as GridTowers: the example physics
// menu, every finder included, on the generator's mu = 60 crossings (the
// natural mix and forced hard processes) and on dense ones.
func TestGridTowersMatchTowers(t *testing.T) {
	m, err := LoadMenu(physicsMenuPath)
	if err != nil {
		t.Fatal(err)
	}
	g := lanternGrid()
	sa, sb := mustSelector(t, m), mustSelector(t, m)
	evs, _ := physicsEvents(t, 24, 60, "", 11)
	for i, p := range []string{"z-mumu", "z-ee", "top-pair"} {
		more, _ := physicsEvents(t, 6, 60, p, uint64(30+i))
		evs = append(evs, more...)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	for i := range 8 {
		evs = append(evs, denseEvent(rng, g, 1500+rng.IntN(500), uint32(i)))
	}
	var fa, fb Features
	var da, db Decision
	grid := 0
	for i, ev := range evs {
		packed := toGridTowers(ev, g)
		if len(packed.GridTowers) == 0 {
			t.Fatalf("event %d: no tower at a cell centre", i)
		}
		grid += len(packed.GridTowers)
		sameOutcome(t, i, sa, sb, ev, packed, &fa, &fb, &da, &db)
	}
	if grid < 100*len(evs) {
		t.Fatalf("only %d grid towers in %d events", grid, len(evs))
	}
}

// edgeCollections are the finders the edge-case tests run: one on the
// hot cells and the EM layer, one on the selected towers, one on cells.
func edgeCollections(t *testing.T) []CollectionConfig {
	t.Helper()
	em, _ := NewEMClusterFinder(EMClusterConfig{Seed: 2})
	ak, _ := NewAntiKtFinder(AntiKtConfig{Radius: 0.4, MinET: 1, Towers: true})
	win, err := NewWindowFinder(WindowConfig{MinET: 1})
	if err != nil {
		t.Fatal(err)
	}
	return []CollectionConfig{{Name: "ems", Algorithm: em}, {Name: "akt", Algorithm: ak}, {Name: "win", Algorithm: win}}
}

// sameOutcome fails t unless selectors sa and sb, of the same menu, give
// event a and its other form b the same features and decisions.
func sameOutcome(t *testing.T, i int, sa, sb *Selector, a, b *Event, fa, fb *Features, da, db *Decision) {
	t.Helper()
	sa.ComputeFeatures(a, fa)
	sb.ComputeFeatures(b, fb)
	if what, ok := sameFeatures(fa, fb); !ok {
		t.Fatalf("event %d: %s differ", i, what)
	}
	sa.Decide(a, da)
	sb.Decide(b, db)
	if da.Accept != db.Accept || !slices.Equal(da.Passed, db.Passed) || !slices.Equal(da.Kept, db.Kept) || !slices.Equal(da.Streams, db.Streams) {
		t.Fatalf("event %d: decisions differ", i)
	}
}

// Every kind of awkward tower gives the same features in either form:
// towers off the grid in eta and in phi, negative, zero, NaN and infinite
// E_T, rows outside the |eta| range, towers mixed with plain Towers, under
// several tower selections and grids (one too small for the cells, one
// invalid).
func TestGridTowersEdgeCases(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	colls := edgeCollections(t)
	grids := []Grid{lanternGrid(), {EtaBins: 6, PhiBins: 4, EtaMin: -0.3, EtaStep: 0.1}, {}}
	ets := []float64{0, 0, -1, 3, 0.2, 7, 45, math.NaN(), math.Inf(1), math.Inf(-1), 1e300, 5e-324}
	for gi, g := range grids {
		for _, cut := range []FeatureConfig{{}, {NoiseCut: 0.5, EtaMax: 2.5}, {NoiseCut: 1, EtaMin: 0.5, EtaMax: 3.3}} {
			cfg := cut
			cfg.Grid, cfg.Collections = g, colls
			for trial := range 40 {
				ev := &Event{}
				for range rng.IntN(30) {
					ev.Towers = append(ev.Towers, Tower{Layer: uint8(rng.IntN(2)), IEta: rng.IntN(90) - 5, IPhi: rng.IntN(70) - 3, Eta: rng.NormFloat64() * 2, Phi: rng.Float64()*7 - 3.5, ET: ets[rng.IntN(len(ets))]})
				}
				for range 20 + rng.IntN(300) {
					ieta, iphi := rng.IntN(84), rng.IntN(68)
					if rng.IntN(50) == 0 {
						ieta = math.MaxUint16 - rng.IntN(2)
					}
					et := rng.ExpFloat64() * 3
					if rng.IntN(6) == 0 {
						et = ets[rng.IntN(len(ets))]
					}
					ev.GridTowers = append(ev.GridTowers, GridTower{ET: et, IEta: uint16(ieta), IPhi: uint16(iphi), Layer: uint8(rng.IntN(2))})
				}
				var fa, fb Features
				computeFeatures(expandGridTowers(ev, g), &cfg, &fa)
				computeFeatures(ev, &cfg, &fb)
				if what, ok := sameFeatures(&fa, &fb); !ok {
					t.Fatalf("grid %d, cuts %+v, trial %d: %s differ", gi, cut, trial, what)
				}
			}
		}
	}
}

// A tower arriving when every cell of the grid already holds energy finds
// room in the cell lists (they are written before they are counted).
func TestEveryCellTouched(t *testing.T) {
	g := Grid{EtaBins: 3, PhiBins: 3, EtaMin: -0.15, EtaStep: 0.1}
	em, _ := NewEMClusterFinder(EMClusterConfig{Seed: 0.5})
	cfg := FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "ems", Algorithm: em}}}
	for _, form := range []string{"towers", "grid towers", "count towers"} {
		ev := &Event{}
		for round := range 2 {
			for c := range g.Cells() {
				switch form {
				case "grid towers":
					ev.GridTowers = append(ev.GridTowers, GridTower{ET: 1, IEta: uint16(c / 3), IPhi: uint16(c % 3), Layer: uint8(round)})
				default:
					ev.Towers = append(ev.Towers, cellTower(g, uint8(round), c/3, c%3, 1))
				}
			}
		}
		if form == "count towers" {
			ev = toCountTowers(ev, g, 0.25)
		}
		var f Features
		computeFeatures(ev, &cfg, &f)
		// 9 cells of 1 + 1 GeV: sum ET 18 GeV, each cell listed once.
		if f.SumET != 18 || len(f.in.Touched) != 9 || len(f.in.Hot) != 9 || ev.NumTowers() != 18 {
			t.Fatalf("%s: sum ET %v, %d touched, %d hot, %d towers", form, f.SumET, len(f.in.Touched), len(f.in.Hot), ev.NumTowers())
		}
	}
}
