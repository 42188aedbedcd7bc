package trigger

import (
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
)

// countTables holds countTable's tables by grid.
var countTables sync.Map

// countTable returns a table of every (layer, ieta, iphi) cell of g, two
// layers, at index layer*cells + ieta*phiBins + iphi, as a readout's
// tower numbering might be: one per grid, shared by the events that use
// it as a readout's events share theirs.
func countTable(g Grid) []GridTower {
	if t, ok := countTables.Load(g); ok {
		return t.([]GridTower)
	}
	cells := g.Cells()
	table := make([]GridTower, 2*cells)
	for i := range table {
		c := i % cells
		table[i] = GridTower{IEta: uint16(c / g.PhiBins), IPhi: uint16(c % g.PhiBins), Layer: uint8(i / cells)}
	}
	t, _ := countTables.LoadOrStore(g, table)
	return t.([]GridTower)
}

// toCountTowers returns ev with its trailing run of towers that sit at a
// cell centre of g with an E_T of a whole number of lsb (below 2^16 of
// them) given as CountTowers on countTable(g), the rest left as they are.
func toCountTowers(ev *Event, g Grid, lsb float64) *Event {
	count := func(t Tower) (uint32, bool) {
		if t.IEta < 0 || t.IPhi < 0 || t.IEta >= g.EtaBins || t.IPhi >= g.PhiBins || t.Layer > 1 ||
			t.Eta != g.EtaCentre(t.IEta) || t.Phi != g.PhiCentre(t.IPhi) || !(t.ET >= 0) {
			return 0, false
		}
		c := math.Round(t.ET / lsb)
		return uint32(c), c < 1<<16 && float64(uint32(c))*lsb == t.ET
	}
	out := &Event{MuonHits: ev.MuonHits, LumiSlice: ev.LumiSlice}
	k := len(ev.Towers)
	for k > 0 {
		if _, ok := count(ev.Towers[k-1]); !ok {
			break
		}
		k--
	}
	out.Towers = ev.Towers[:k]
	out.Counted = CountTowers{Cells: countTable(g), GeVPerCount: lsb}
	for _, t := range ev.Towers[k:] {
		c, _ := count(t)
		idx := uint32(t.Layer)*uint32(g.Cells()) + uint32(t.IEta*g.PhiBins+t.IPhi)
		out.Counted.Words = append(out.Counted.Words, idx|c<<16)
	}
	return out
}

// quantized returns ev with every tower's E_T rounded to a whole number of
// lsb, as a readout's would be.
func quantized(ev *Event, lsb float64) *Event {
	out := &Event{MuonHits: ev.MuonHits, LumiSlice: ev.LumiSlice, Towers: slices.Clone(ev.Towers)}
	for i := range out.Towers {
		t := &out.Towers[i]
		if finite(t.ET) {
			t.ET = math.Round(t.ET/lsb) * lsb
		}
	}
	return out
}

// The features and decisions of the generator's crossings (readout E_T,
// whole least counts) are the same whether their towers come as Towers or
// as CountTowers: the example physics menu, every finder included, on
// natural mu = 60 crossings and forced hard processes.
func TestCountTowersMatchGridTowers(t *testing.T) {
	m, err := LoadMenu(physicsMenuPath)
	if err != nil {
		t.Fatal(err)
	}
	g := lanternGrid()
	lsb := detector.DefaultDescription().Geometry.LeastCountGeV
	sa, sb := mustSelector(t, m), mustSelector(t, m)
	evs, _ := physicsEvents(t, 24, 60, "", 12)
	for i, p := range []string{"z-mumu", "z-ee", "top-pair"} {
		more, _ := physicsEvents(t, 6, 60, p, uint64(40+i))
		evs = append(evs, more...)
	}
	var fa, fb Features
	var da, db Decision
	for i, ev := range evs {
		counted := toCountTowers(ev, g, lsb)
		if len(counted.Towers) != 0 || len(counted.Counted.Words) == 0 {
			t.Fatalf("event %d: %d towers not converted, %d words", i, len(counted.Towers), len(counted.Counted.Words))
		}
		sameOutcome(t, i, sa, sb, ev, counted, &fa, &fb, &da, &db)
	}
}

// Every kind of awkward word gives the features of the Towers it stands
// for (Event.TowerAt): table entries off the grid in eta and in phi,
// indices beyond the table, zero and full-scale counts, least counts that
// are inexact, huge, zero, negative or not finite, rows outside the |eta|
// range, and words after Towers and GridTowers, under several tower
// selections and grids (one too small for the cells, one invalid).
func TestCountTowersEdgeCases(t *testing.T) {
	rng := rand.New(rand.NewPCG(18, 19))
	colls := edgeCollections(t)
	table := slices.Clone(countTable(lanternGrid()))
	// Entries off the Lantern grid: beyond its rows and columns, and at
	// the largest indices a GridTower can hold.
	table = append(table, GridTower{IEta: 80, IPhi: 3}, GridTower{IEta: 5, IPhi: 64, Layer: 1}, GridTower{IEta: math.MaxUint16, IPhi: math.MaxUint16})
	lsbs := []float64{0.25, 0.1, 1e300, 0, -0.25, math.NaN(), math.Inf(1), 5e-324}
	grids := []Grid{lanternGrid(), {EtaBins: 6, PhiBins: 4, EtaMin: -0.3, EtaStep: 0.1}, {}}
	for gi, g := range grids {
		for _, cut := range []FeatureConfig{{}, {NoiseCut: 0.5, EtaMax: 2.5}, {NoiseCut: 1, EtaMin: 0.5, EtaMax: 3.3}} {
			cfg := cut
			cfg.Grid, cfg.Collections = g, colls
			for trial := range 48 {
				ev := &Event{Counted: CountTowers{Cells: table, GeVPerCount: lsbs[trial%len(lsbs)]}}
				for range rng.IntN(20) {
					ev.Towers = append(ev.Towers, Tower{Layer: uint8(rng.IntN(2)), IEta: rng.IntN(90) - 5, IPhi: rng.IntN(70) - 3, Eta: rng.NormFloat64() * 2, Phi: rng.Float64()*7 - 3.5, ET: rng.ExpFloat64() * 3})
				}
				for range rng.IntN(20) {
					ev.GridTowers = append(ev.GridTowers, GridTower{ET: rng.ExpFloat64() * 3, IEta: uint16(rng.IntN(84)), IPhi: uint16(rng.IntN(68)), Layer: uint8(rng.IntN(2))})
				}
				for range 20 + rng.IntN(300) {
					idx := rng.IntN(len(table))
					switch rng.IntN(40) {
					case 0:
						idx = len(table) + rng.IntN(100) // off the table
					case 1:
						idx = math.MaxUint16
					}
					c := uint32(2 + rng.ExpFloat64()*6)
					switch rng.IntN(20) {
					case 0:
						c = 0
					case 1:
						c = math.MaxUint16
					}
					ev.Counted.Words = append(ev.Counted.Words, uint32(idx)|min(c, math.MaxUint16)<<16)
				}
				var fa, fb Features
				computeFeatures(expandGridTowers(ev, g), &cfg, &fa)
				computeFeatures(ev, &cfg, &fb)
				if what, ok := sameFeatures(&fa, &fb); !ok {
					t.Fatalf("grid %d, cuts %+v, trial %d (least count %v): %s differ", gi, cut, trial, ev.Counted.GeVPerCount, what)
				}
				if fb.Bad == 0 && !finite(ev.Counted.GeVPerCount) {
					t.Fatalf("grid %d, trial %d: no bad tower with least count %v", gi, trial, ev.Counted.GeVPerCount)
				}
			}
		}
	}
}

// A word whose index lies outside the table counts as a bad tower and
// adds nothing.
func TestCountTowersOffTheTable(t *testing.T) {
	g := lanternGrid()
	table := countTable(g)
	cfg := FeatureConfig{Grid: g}
	ev := &Event{Counted: CountTowers{Cells: table, GeVPerCount: 0.25, Words: []uint32{7 | 40<<16, uint32(len(table)) | 40<<16, 0xffff | 40<<16}}}
	var f Features
	computeFeatures(ev, &cfg, &f)
	// One tower of 40 counts of 0.25 GeV: 10 GeV.
	if f.SumET != 10 || f.Used != 1 || f.Bad != 2 {
		t.Fatalf("sum ET %v, %d used, %d bad; want 10, 1, 2", f.SumET, f.Used, f.Bad)
	}
	// The GridTowers the words stand for give the same.
	grid := &Event{GridTowers: ev.Counted.AppendGridTowers(nil)}
	var fg Features
	computeFeatures(grid, &cfg, &fg)
	if len(grid.GridTowers) != 3 || fg.SumET != 10 || fg.Used != 1 || fg.Bad != 2 {
		t.Fatalf("as GridTowers: %d towers, sum ET %v, %d used, %d bad; want 3, 10, 1, 2", len(grid.GridTowers), fg.SumET, fg.Used, fg.Bad)
	}
}
