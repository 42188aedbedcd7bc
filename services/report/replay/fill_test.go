package replay

import (
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// The table decoder gives exactly the towers of selector.FillEvent, the
// selection service's decoder, bit for bit: on generated crossings and on
// payloads with zero counts, indices off the grid and lists of unequal
// length.
func TestTowerTableMatchesFillEvent(t *testing.T) {
	d := detector.DefaultDescription()
	g := d.Geometry
	part, err := detector.NewPartition(g, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 3, detector.PhysicsConfig{Mu: 40, LibraryEvents: 100})
	if err != nil {
		t.Fatal(err)
	}
	table := newTowerTable(g)
	r := rand.New(rand.NewPCG(1, 1))
	var c detector.Crossing
	var want, got trigger.Event
	for n := range 60 {
		gen.Generate(uint64(n), &c)
		var frags []*pb.Fragment
		for i, list := range c.PerSource {
			calo := &pb.CaloPayload{}
			for _, tc := range list {
				calo.Towers = append(calo.Towers, tc.Tower)
				calo.EtCounts = append(calo.EtCounts, tc.Counts)
			}
			switch n % 4 {
			case 1:
				calo.Towers = append(calo.Towers, uint32(g.Towers()+r.IntN(100)), 7)
				calo.EtCounts = append(calo.EtCounts, 5, 0)
			case 2:
				calo.EtCounts = append(calo.EtCounts, 9, 9)
			case 3:
				if len(calo.Towers) > 0 {
					calo.Towers = calo.Towers[:len(calo.Towers)-1]
				}
			}
			frags = append(frags, &pb.Fragment{SourceId: uint32(i + 1), Payload: &pb.Fragment_Calo{Calo: calo}})
		}
		muon := &pb.MuonPayload{}
		for k := range n % 3 {
			muon.Hits = append(muon.Hits, &pb.MuonHit{Station: uint32(k), XMm: r.Float32() * 1e4, YMm: -r.Float32() * 1e4, ZMm: r.Float32()})
		}
		frags = append(frags, &pb.Fragment{SourceId: 99, Payload: &pb.Fragment_Muon{Muon: muon}})
		selector.FillEvent(g, frags, uint32(n), &want)
		table.fill(frags, uint32(n), &got)
		if want.NumTowers() == 0 || !reflect.DeepEqual(got.Towers, want.Towers) || !reflect.DeepEqual(got.GridTowers, want.GridTowers) ||
			got.LumiSlice != want.LumiSlice {
			t.Fatalf("crossing %d: table gives %d towers, FillEvent %d (or they differ)", n, got.NumTowers(), want.NumTowers())
		}
		if len(got.MuonHits) != len(want.MuonHits) || len(got.MuonHits) > 0 && !reflect.DeepEqual(got.MuonHits, want.MuonHits) {
			t.Fatalf("crossing %d: table gives muon hits %v, FillEvent %v", n, got.MuonHits, want.MuonHits)
		}
	}
}

// The menu sees the same event whichever form the towers take: the
// GridTowers of the table give, on generated mu = 60 crossings and the
// physics example menu, bit for bit the features and the rule decisions
// of Towers at the geometry's tower centres, the form replays filled
// before.
func TestGridTowersDecideAsTowers(t *testing.T) {
	d := detector.DefaultDescription()
	g := d.Geometry
	part, err := detector.NewPartition(g, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 5, detector.PhysicsConfig{Mu: 60, LibraryEvents: 200})
	if err != nil {
		t.Fatal(err)
	}
	m := physicsMenu(t)
	grid := trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep}
	selGrid, err := trigger.NewSelector(m, grid)
	if err != nil {
		t.Fatal(err)
	}
	selWide, err := trigger.NewSelector(m, grid)
	if err != nil {
		t.Fatal(err)
	}
	table := newTowerTable(g)
	var c detector.Crossing
	var ev, wide trigger.Event
	var fg, fw trigger.Features
	var dg, dw trigger.Decision
	passes := 0
	for n := range 150 {
		gen.Generate(uint64(n), &c)
		var frags []*pb.Fragment
		wide.Towers = wide.Towers[:0]
		for i, list := range c.PerSource {
			calo := &pb.CaloPayload{}
			for _, tc := range list {
				calo.Towers = append(calo.Towers, tc.Tower)
				calo.EtCounts = append(calo.EtCounts, tc.Counts)
				layer, ieta, iphi, ok := g.TowerCoords(int(tc.Tower))
				if ok && tc.Counts != 0 {
					wide.Towers = append(wide.Towers, trigger.Tower{Layer: uint8(layer), IEta: ieta, IPhi: iphi,
						Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi), ET: g.ET(tc.Counts)})
				}
			}
			frags = append(frags, &pb.Fragment{SourceId: uint32(i + 1), Payload: &pb.Fragment_Calo{Calo: calo}})
		}
		table.fill(frags, 1, &ev)
		if len(ev.Towers) != 0 || len(ev.GridTowers) != len(wide.Towers) || len(wide.Towers) == 0 {
			t.Fatalf("crossing %d: %d grid towers and %d towers, want %d grid towers", n, len(ev.GridTowers), len(ev.Towers), len(wide.Towers))
		}
		wide.LumiSlice = 1
		selGrid.ComputeFeatures(&ev, &fg)
		selWide.ComputeFeatures(&wide, &fw)
		selGrid.DecideFeatures(&fg, 1, &dg)
		selWide.DecideFeatures(&fw, 1, &dw)
		if fg.METx != fw.METx || fg.METy != fw.METy || fg.SumET != fw.SumET || fg.Used != fw.Used || fg.OffGrid != fw.OffGrid {
			t.Fatalf("crossing %d: MET (%v, %v) sum %v used %d, Towers give (%v, %v) %v %d", n, fg.METx, fg.METy, fg.SumET, fg.Used, fw.METx, fw.METy, fw.SumET, fw.Used)
		}
		for _, name := range scalarNames(m) {
			a, _ := fg.Scalar(name)
			b, _ := fw.Scalar(name)
			if a != b && !(a != a && b != b) {
				t.Fatalf("crossing %d: %s = %v, Towers give %v", n, name, a, b)
			}
		}
		for _, name := range collectionNames(m) {
			if !reflect.DeepEqual(fg.Collection(name), fw.Collection(name)) {
				t.Fatalf("crossing %d: collection %s differs between the tower forms", n, name)
			}
		}
		if !reflect.DeepEqual(dg.Passed, dw.Passed) {
			t.Fatalf("crossing %d: rules passed %v, Towers give %v", n, dg.Passed, dw.Passed)
		}
		for _, p := range dg.Passed {
			if p {
				passes++
			}
		}
	}
	if passes == 0 {
		t.Fatal("no rule passed on any crossing: the comparison saw nothing")
	}
}

// A stream reports the mean pile-up of the generator that made it, read
// from the settings `bunchsieve record` writes (the whole GeneratorConfig,
// every kind's section included): the toy generator's mu for a toy stream,
// not the physics section's.
func TestStreamMuIsTheSelectedGenerators(t *testing.T) {
	d := detector.DefaultDescription()
	settings := func(g detector.GeneratorConfig) string {
		text, err := yaml.Marshal(g)
		if err != nil {
			t.Fatal(err)
		}
		return string(text)
	}
	both := detector.GeneratorConfig{Simple: detector.SimpleConfig{Mu: 20}, Physics: detector.PhysicsConfig{Mu: 60}}
	simple, physics, byLumi := both, both, both
	simple.Kind, physics.Kind = detector.GeneratorSimple, detector.GeneratorPhysics
	byLumi.Kind, byLumi.Physics = detector.GeneratorPhysics, detector.PhysicsConfig{Luminosity: 2e34}
	// mu = L sigma_inel / (n_b f_rev) with the physics generator's default
	// sigma_inel (TOTEM's 79.5 mb at 13 TeV, see docs/physics-model.md) on
	// the Lantern filling scheme's colliding bunches.
	wantLumi := detector.PileUpMu(2e34, 79.5, d.Filling.Colliding(), detector.RevolutionHz)
	for _, c := range []struct {
		name, config, kind string
		want               float64
	}{
		{"toy stream", settings(simple), "simple", 20},
		{"toy stream, kind left to the header", settings(both), "simple", 20},
		{"physics stream", settings(physics), "physics", 60},
		{"physics stream, mu from luminosity", settings(byLumi), "physics", wantLumi},
		{"older settings with a top-level mu", "mu: 35\n", "simple", 35},
		{"no settings", "", "test", 0},
		{"unreadable settings", "mu: [", "simple", 0},
	} {
		if got := muOf(c.config, c.kind, d); got != c.want {
			t.Errorf("%s: mu %v, want %v", c.name, got, c.want)
		}
	}
	// By hand: 2e34 cm^-2 s^-1 x 79.5e-27 cm^2 / (2400 x 11245.5 Hz) = 58.91.
	if math.Abs(wantLumi-58.91) > 0.01 {
		t.Fatalf("mu %v from 2e34 cm^-2 s^-1, want 58.91", wantLumi)
	}
}
