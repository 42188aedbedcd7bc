package trigger

import (
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/detector"
)

// benchEvents returns events of 300 to 1000 towers, made before the timed
// loop.
func benchEvents(b *testing.B) []*Event {
	rng := rand.New(rand.NewPCG(2024, 7))
	evs := make([]*Event, 64)
	for i := range evs {
		evs[i] = syntheticEvent(rng, lanternGrid(), 300+rng.IntN(700), uint32(1+i/16))
	}
	return evs
}

func starterSelector(b *testing.B) *Selector {
	data, err := os.ReadFile(starterPath)
	if err != nil {
		b.Fatal(err)
	}
	m, err := ParseMenu(starterPath, data)
	if err != nil {
		b.Fatal(err)
	}
	return mustSelector(b, m)
}

func towersPerEvent(evs []*Event) float64 {
	n := 0
	for _, ev := range evs {
		n += ev.NumTowers()
	}
	return float64(n) / float64(len(evs))
}

func BenchmarkDecide(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	var d Decision
	b.ReportAllocs()
	measureEvents(b, func(i int) { s.Decide(evs[i%len(evs)], &d) })
	b.ReportMetric(towersPerEvent(evs), "towers/event")
}

func BenchmarkDecideParallel(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	b.ReportAllocs()
	b.ResetTimer()
	b.RunParallel(func(pb *testing.PB) {
		var d Decision
		i := 0
		for pb.Next() {
			s.Decide(evs[i%len(evs)], &d)
			i++
		}
	})
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "events/s")
}

func BenchmarkFeatures(b *testing.B) {
	s := starterSelector(b)
	cfg := s.cfg
	evs := benchEvents(b)
	var f Features
	b.ReportAllocs()
	measureEvents(b, func(i int) { ComputeFeatures(evs[i%len(evs)], cfg, &f) })
}

// BenchmarkRules times the rule evaluation alone, on features computed
// before the loop.
func BenchmarkRules(b *testing.B) {
	s := starterSelector(b)
	evs := benchEvents(b)
	fs := make([]Features, len(evs))
	for i, ev := range evs {
		s.ComputeFeatures(ev, &fs[i])
	}
	var d Decision
	b.ReportAllocs()
	measureEvents(b, func(i int) { s.DecideFeatures(&fs[i%len(fs)], 1, &d) })
}

func BenchmarkParseMenu(b *testing.B) {
	data, err := os.ReadFile(starterPath)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		if _, err := ParseMenu(starterPath, data); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkAntiKt1000 clusters events of 1,000 massless inputs with
// R = 0.4: "grid" has towers at calorimeter cell centres (at most one per
// cell, as the finder's inputs are), "dense" has a third of them packed
// into a few sprays of width 0.15, far denser than a calorimeter reads out.
func BenchmarkAntiKt1000(b *testing.B) {
	for _, c := range []struct {
		name   string
		onGrid bool
	}{{"grid", true}, {"dense", false}} {
		b.Run(c.name, func(b *testing.B) {
			rng := rand.New(rand.NewPCG(9, 9))
			evs := make([][]FourMomentum, 16)
			for i := range evs {
				if c.onGrid {
					evs[i] = distinctCells(rng, 1000)
				} else {
					evs[i] = towerInputs(rng, 1000, false)
				}
			}
			a, _ := NewAntiKt(0.4)
			var jets []AntiKtJet
			b.ReportAllocs()
			n, wall, cpu := measureEvents(b, func(i int) { jets = a.Cluster(evs[i%len(evs)], 0, jets) })
			b.ReportMetric(wall.Seconds()*1e3/float64(n), "ms/event")
			if cpu > 0 {
				b.ReportMetric(cpu.Seconds()*1e3/float64(n), "cpu-ms/event")
			}
		})
	}
}

// distinctCells returns n massless inputs at distinct Lantern cell
// centres: a few hard sprays over soft deposits, as a calorimeter reads out.
func distinctCells(rng *rand.Rand, n int) []FourMomentum {
	g := lanternGrid()
	seen := map[int]bool{}
	var ps []FourMomentum
	for _, p := range towerInputs(rng, 4*n, false) {
		ieta := min(max(int((p.Eta()-g.EtaMin)/g.EtaStep), 0), g.EtaBins-1)
		ph := p.Phi()
		if ph > math.Pi {
			ph -= 2 * math.Pi
		}
		iphi := min(max(int((ph+math.Pi)/g.PhiStep()), 0), g.PhiBins-1)
		if c := ieta*g.PhiBins + iphi; !seen[c] && len(ps) < n {
			seen[c] = true
			ps = append(ps, PtEtaPhi(p.Pt(), g.EtaCentre(ieta), g.PhiCentre(iphi)))
		}
	}
	return ps
}

// physicsBenchSets are the event samples the physics-menu benchmarks run
// on, made before the timed loops: crossings of the detector package's
// generator at mu = 60 (the natural mix of processes, and a mix of forced
// hard processes), and dense synthetic crossings of about 2,000 towers.
func physicsBenchSets(b *testing.B) []struct {
	name string
	evs  []*Event
} {
	natural, _ := physicsEvents(b, 128, 60, "", 11)
	var hard []*Event
	for i, p := range []string{"z-mumu", "z-ee", "w-munu", "w-enu", "top-pair", "multijet"} {
		evs, _ := physicsEvents(b, 24, 60, p, uint64(20+i))
		hard = append(hard, evs...)
	}
	rng := rand.New(rand.NewPCG(77, 1))
	dense := make([]*Event, 64)
	for i := range dense {
		dense[i] = denseEvent(rng, lanternGrid(), 1700+rng.IntN(500), uint32(1+i/16))
	}
	return []struct {
		name string
		evs  []*Event
	}{{"mu60-natural", natural}, {"mu60-hard", hard}, {"dense-2000", dense}}
}

func physicsSelector(b *testing.B) *Selector {
	m, err := LoadMenu(physicsMenuPath)
	if err != nil {
		b.Fatal(err)
	}
	return mustSelector(b, m)
}

// BenchmarkPhysicsMenu decides events with the ~60-rule example menu, every
// feature computed (anti-kt R = 0.4 and R = 1.0 jets, window jets, EM
// clusters, muon candidates, narrow clusters), on one goroutine.
//
// The towers come in three forms: "grid", as GridTowers, the form the
// selection service fills from the readout's payloads, "counted", as
// CountTowers, the form the replay fills, and "towers", as Tower structs.
func BenchmarkPhysicsMenu(b *testing.B) {
	s := physicsSelector(b)
	g := lanternGrid()
	lsb := detector.DefaultDescription().Geometry.LeastCountGeV
	for _, set := range physicsBenchSets(b) {
		grid := make([]*Event, len(set.evs))
		counted := make([]*Event, len(set.evs))
		for i, ev := range set.evs {
			if grid[i] = toGridTowers(ev, g); len(grid[i].Towers) != 0 {
				b.Fatalf("%s event %d: %d towers off their cell centres", set.name, i, len(grid[i].Towers))
			}
			// The synthetic dense sample's energies are not whole least
			// counts, as a readout's are: it has no counted form.
			if counted != nil {
				if counted[i] = toCountTowers(ev, g, lsb); len(counted[i].Towers) != 0 {
					counted = nil
				}
			}
		}
		for _, form := range []struct {
			name string
			evs  []*Event
		}{{"grid", grid}, {"counted", counted}, {"towers", set.evs}} {
			if form.evs == nil {
				continue
			}
			b.Run(set.name+"/"+form.name, func(b *testing.B) {
				var d Decision
				b.ReportAllocs()
				measureEvents(b, func(i int) { s.Decide(form.evs[i%len(form.evs)], &d) })
				b.ReportMetric(towersPerEvent(form.evs), "towers/event")
			})
		}
	}
}

// BenchmarkPhysicsFeature times each collection of the example menu alone
// (with the tower selection, MET and sum ET every configuration pays).
func BenchmarkPhysicsFeature(b *testing.B) {
	s := physicsSelector(b)
	sets := physicsBenchSets(b)
	for _, cc := range append([]CollectionConfig{{Name: "none"}}, s.cfg.Collections...) {
		cfg := s.cfg
		cfg.Collections = nil
		if cc.Algorithm != nil {
			cfg.Collections = []CollectionConfig{cc}
		}
		for _, set := range sets[:2] {
			b.Run(cc.Name+"/"+set.name, func(b *testing.B) {
				var f Features
				b.ReportAllocs()
				measureEvents(b, func(i int) { computeFeatures(set.evs[i%len(set.evs)], &cfg, &f) })
			})
		}
	}
}

// measureEvents runs step in b.Loop and reports events/s by the wall clock
// and events/cpu-s by the CPU time of the process: on a shared machine the
// wall clock also counts the time other programs hold the core, the CPU
// time does not. It returns the number of steps, the wall time and the CPU
// time (0 where it cannot be read).
func measureEvents(b *testing.B, step func(i int)) (int, time.Duration, time.Duration) {
	c0 := cpuTime()
	i := 0
	for b.Loop() {
		step(i)
		i++
	}
	cpu := cpuTime() - c0
	wall := b.Elapsed()
	b.ReportMetric(float64(i)/wall.Seconds(), "events/s")
	if cpu > 0 {
		b.ReportMetric(float64(i)/cpu.Seconds(), "events/cpu-s")
	} else {
		cpu = 0
	}
	return i, wall, cpu
}

// BenchmarkTowerSelection times the tower pass alone on the generator's
// mu = 60 crossings: the tower selection, MET and sum ET, the grid cells,
// and with "layers+hot" also the per-layer cells and the hot-cell list
// that the EM and narrow-cluster finders ask for.
func BenchmarkTowerSelection(b *testing.B) {
	evs, _ := physicsEvents(b, 64, 60, "", 11)
	g := lanternGrid()
	grid, counted := make([]*Event, len(evs)), make([]*Event, len(evs))
	lsb := detector.DefaultDescription().Geometry.LeastCountGeV
	for i, ev := range evs {
		grid[i], counted[i] = toGridTowers(ev, g), toCountTowers(ev, g, lsb)
	}
	em, _ := NewEMClusterFinder(EMClusterConfig{Seed: 1e6})
	for _, c := range []struct {
		name  string
		colls []CollectionConfig
	}{{"plain", nil}, {"layers+hot", []CollectionConfig{{Name: "ems", Algorithm: em}}}} {
		for _, form := range []struct {
			name string
			evs  []*Event
		}{{"grid", grid}, {"counted", counted}, {"towers", evs}} {
			b.Run(c.name+"/"+form.name, func(b *testing.B) {
				cfg := FeatureConfig{Grid: g, NoiseCut: 0.5, EtaMax: 4, Collections: c.colls}
				var f Features
				b.ReportAllocs()
				measureEvents(b, func(i int) { computeFeatures(form.evs[i%len(form.evs)], &cfg, &f) })
				b.ReportMetric(towersPerEvent(form.evs), "towers/event")
			})
		}
	}
}

// BenchmarkAntiKtInputCut times the anti-kt finder (R = 0.4, jets above
// 20 GeV) on the generator's mu = 60 crossings for several input cuts,
// reporting the mean number of cells clustered: the cut is what sets the
// cost at high pile-up.
func BenchmarkAntiKtInputCut(b *testing.B) {
	evs, _ := physicsEvents(b, 64, 60, "", 11)
	for _, cut := range []float64{0.5, 1, 2, 3} {
		f, _ := NewAntiKtFinder(AntiKtConfig{Radius: 0.4, MinET: 20, InputMinET: cut})
		cfg := FeatureConfig{Grid: lanternGrid(), NoiseCut: 0.5, EtaMax: 4, Collections: []CollectionConfig{{Name: "jets", Algorithm: f}}}
		b.Run(strconv.FormatFloat(cut, 'g', -1, 64)+"GeV", func(b *testing.B) {
			var feats Features
			inputs := 0
			measureEvents(b, func(i int) {
				computeFeatures(evs[i%len(evs)], &cfg, &feats)
				inputs += len(feats.outs[0].Scratch.(*antiKtScratch).ak.js)
			})
			b.ReportMetric(float64(inputs)/float64(b.N), "inputs/event")
		})
	}
}

// BenchmarkAntiKt300 clusters the same events of 300 tower-like inputs
// with our tiled search and with go-hep's fastjet (v0.36.0), whose
// BestStrategy runs the O(N^3) search: the ratio is the speed-up.
func BenchmarkAntiKt300(b *testing.B) {
	rng := rand.New(rand.NewPCG(3, 30))
	evs := make([][]FourMomentum, 8)
	for i := range evs {
		evs[i] = towerInputs(rng, 300, false)
	}
	b.Run("tiled", func(b *testing.B) {
		a, _ := NewAntiKt(0.4)
		var jets []AntiKtJet
		n, wall, _ := measureEvents(b, func(i int) { jets = a.Cluster(evs[i%len(evs)], 0, jets) })
		b.ReportMetric(wall.Seconds()*1e3/float64(n), "ms/event")
	})
	b.Run("reference", func(b *testing.B) {
		n, wall, _ := measureEvents(b, func(i int) { referenceJets(b, evs[i%len(evs)], 0.4) })
		b.ReportMetric(wall.Seconds()*1e3/float64(n), "ms/event")
	})
}

// BenchmarkPhysicsMenuJetCut decides the generator's mu = 60 crossings
// with the example menu as shipped (R = 0.4 anti-kt on cells of at least
// 3 GeV) and with that cut at 2 GeV, the one setting that moves the cost
// of the whole menu most.
func BenchmarkPhysicsMenuJetCut(b *testing.B) {
	data, err := os.ReadFile(physicsMenuPath)
	if err != nil {
		b.Fatal(err)
	}
	const shipped = "input_min_et: 3 GeV, ht_min: 30 GeV"
	if !strings.Contains(string(data), shipped) {
		b.Fatalf("the example menu no longer has %q", shipped)
	}
	evs, _ := physicsEvents(b, 128, 60, "", 11)
	for _, cut := range []string{"3 GeV", "2 GeV"} {
		m, err := ParseMenu(physicsMenuPath, []byte(strings.Replace(string(data), shipped, "input_min_et: "+cut+", ht_min: 30 GeV", 1)))
		if err != nil {
			b.Fatal(err)
		}
		s := mustSelector(b, m)
		b.Run(strings.ReplaceAll(cut, " ", ""), func(b *testing.B) {
			var d Decision
			measureEvents(b, func(i int) { s.Decide(evs[i%len(evs)], &d) })
		})
	}
}
