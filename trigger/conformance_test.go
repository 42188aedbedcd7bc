package trigger

import (
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"sync"
	"testing"
)

// checkAlgorithm runs an Algorithm through the contract every algorithm
// must keep: a stable schema, finite object values, deterministic output
// (fresh or reused Features, the same Output run twice), an Input left
// untouched (towers, muon hits, cells, layer cells, hot cells, selection),
// no panic on empty or bad events, and no shared state between Outputs
// (run it with -race). It is the kit a new algorithm is run through, in
// its own test or by TestConformanceStandard for the standard set.
func checkAlgorithm(t *testing.T, alg Algorithm, g Grid) {
	t.Helper()
	if !reflect.DeepEqual(alg.Schema(), alg.Schema()) {
		t.Fatal("Schema changes between calls")
	}
	if v, ok := alg.(GridValidator); ok {
		if err := v.ValidateGrid(g); err != nil {
			t.Fatalf("ValidateGrid: %v", err)
		}
	}
	cfg := FeatureConfig{Grid: g, NoiseCut: 0.2, Collections: []CollectionConfig{{Name: "objs", Algorithm: alg}}}
	rng := rand.New(rand.NewPCG(7, 11))
	var events []*Event
	for i := 0; i < 20; i++ {
		ev := syntheticEvent(rng, g, 50+rng.IntN(600), 1)
		addMuons(rng, ev, rng.IntN(4))
		events = append(events, ev)
	}
	bad := syntheticEvent(rng, g, 100, 1)
	bad.Towers = append(bad.Towers, Tower{ET: math.NaN()}, Tower{ET: 5, Eta: math.Inf(1)}, Tower{ET: 1e300, IEta: -3, IPhi: 99})
	addMuons(rng, bad, 2)
	bad.MuonHits = append(bad.MuonHits, MuonHit{X: math.NaN()}, MuonHit{}, MuonHit{Station: -1, X: 1, Y: 1, Z: math.Inf(-1)}, MuonHit{Station: 3, X: 1e300, Y: 1e300})
	events = append(events, &Event{}, bad)

	run := func(f *Features, ev *Event) []float64 {
		computeFeatures(ev, &cfg, f)
		return append(slices.Clone(f.colls[0].vals), f.outs[0].Scalars...)
	}
	// Reference results from a fresh Features per event.
	want := make([][]float64, len(events))
	for i, ev := range events {
		var f Features
		want[i] = run(&f, ev)
		for _, v := range want[i] {
			if !finite(v) {
				t.Fatalf("event %d: a value %v", i, v)
			}
		}
	}
	// The same events with their cell-centred towers as GridTowers, the
	// form the services fill, give the same objects.
	for i, ev := range events {
		var f Features
		if got := run(&f, toGridTowers(ev, g)); !slices.Equal(got, want[i]) {
			t.Fatalf("event %d as grid towers: %v, as towers %v", i, got, want[i])
		}
	}
	// The same events with readout E_T (whole least counts of 0.25 GeV)
	// give the same objects as Towers and as CountTowers, the form the
	// replay fills.
	for i, ev := range events {
		q := quantized(ev, 0.25)
		var fa, fb Features
		if got, want := run(&fb, toCountTowers(q, g, 0.25)), run(&fa, q); !slices.Equal(got, want) {
			t.Fatalf("event %d as count towers: %v, as towers %v", i, got, want)
		}
	}
	// A reused Features, the same Output run twice, and the Input left as
	// it was given.
	var f Features
	for i, ev := range events {
		towers, hits := slices.Clone(ev.Towers), slices.Clone(ev.MuonHits)
		computeFeatures(ev, &cfg, &f)
		in := f.in
		saved := [][]float64{slices.Clone(in.Cells), slices.Clone(in.EMCells)}
		ints := [][]int32{slices.Clone(in.Touched), slices.Clone(in.Selected), slices.Clone(in.Hot)}
		in.Event = ev
		for pass := 0; pass < 2; pass++ {
			f.colls[0].Reset()
			clear(f.outs[0].Scalars)
			alg.Run(&in, &f.outs[0])
			if !slices.Equal(ev.Towers, towers) && !nanEqual(ev.Towers, towers) || !slices.Equal(ev.MuonHits, hits) && !nanEqualHits(ev.MuonHits, hits) {
				t.Fatalf("event %d: Run modified the event", i)
			}
			for k, s := range [][]float64{in.Cells, in.EMCells} {
				if !slices.Equal(s, saved[k]) {
					t.Fatalf("event %d: Run modified cells %d", i, k)
				}
			}
			for k, s := range [][]int32{in.Touched, in.Selected, in.Hot} {
				if !slices.Equal(s, ints[k]) {
					t.Fatalf("event %d: Run modified index list %d", i, k)
				}
			}
			if got := append(slices.Clone(f.colls[0].vals), f.outs[0].Scalars...); !slices.Equal(got, want[i]) {
				t.Fatalf("event %d, pass %d: reused Features gave %v, fresh %v", i, pass, got, want[i])
			}
		}
	}
	// Concurrent use with one Output each.
	var wg sync.WaitGroup
	errs := make(chan int, 4)
	for w := 0; w < 4; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var f Features
			for i, ev := range events {
				if got := run(&f, ev); !slices.Equal(got, want[i]) {
					errs <- i
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for i := range errs {
		t.Fatalf("event %d: concurrent run differs", i)
	}
}

// nanEqual compares towers treating NaN fields as equal to themselves.
func nanEqual(a, b []Tower) bool {
	return slices.EqualFunc(a, b, func(x, y Tower) bool {
		same := func(p, q float64) bool { return p == q || p != p && q != q }
		return x.Layer == y.Layer && x.IEta == y.IEta && x.IPhi == y.IPhi && same(x.Eta, y.Eta) && same(x.Phi, y.Phi) && same(x.ET, y.ET)
	})
}

func nanEqualHits(a, b []MuonHit) bool {
	return slices.EqualFunc(a, b, func(x, y MuonHit) bool {
		same := func(p, q float64) bool { return p == q || p != p && q != q }
		return x.Station == y.Station && same(x.X, y.X) && same(x.Y, y.Y) && same(x.Z, y.Z)
	})
}

// addMuons adds the Lantern station hits of n muons of random pT (3 to
// 200 GeV), direction and charge, at 3 T.
func addMuons(rng *rand.Rand, ev *Event, n int) {
	for range n {
		pt := 3 + rng.ExpFloat64()*40
		q := 1 - 2*rng.IntN(2)
		ev.MuonHits = append(ev.MuonHits, helixHits(pt, -2.4+4.8*rng.Float64(), -math.Pi+2*math.Pi*rng.Float64(), q, 50*rng.NormFloat64(), 3, lanternStations)...)
	}
}

// conformanceParams are parameter blocks, beyond the defaults, that the
// standard algorithms are run through the kit with.
var conformanceParams = map[string][]string{
	"window":         {"seed: 5 GeV, min_et: 10 GeV"},
	"antikt":         {"radius: 0.4, min_et: 5 GeV, input_min_et: 0.5 GeV", "radius: 1.0, inputs: towers", "radius: 0.2, input_min_et: 3 GeV"},
	"em-cluster":     {"seed: 2 GeV, min_et: 5 GeV", "ring: 3"},
	"muon-road":      {"min_pt: 5 GeV, min_stations: 3", "road_phi: 0.05, road_eta: 0.05"},
	"narrow-cluster": {"seed: 3 GeV, ring: 1"},
}

// TestConformanceStandard runs every standard algorithm, with its defaults
// and the parameters above, through the kit: a finder added to the
// standard set is checked without any change here.
func TestConformanceStandard(t *testing.T) {
	for _, name := range StandardRegistry().Names() {
		for _, params := range append([]string{""}, conformanceParams[name]...) {
			t.Run(name+"/"+params, func(t *testing.T) {
				block := "{finder: " + name
				if params != "" {
					block += ", " + params
				}
				m := mustParse(t, "menu: c\nversion: 1\nfeatures:\n  objs: "+block+"}\nrules:\n  r: {when: \"met >= 0 GeV\"}\n")
				checkAlgorithm(t, m.Features.Collections[0].Algorithm, lanternGrid())
			})
		}
	}
	for name := range conformanceParams {
		if !slices.Contains(StandardRegistry().Names(), name) {
			t.Errorf("parameters for %q, which is not a standard algorithm", name)
		}
	}
}

// TestConformanceTestAlgorithm runs the registry test's algorithm through
// the kit, as an algorithm from outside the standard set would be.
func TestConformanceTestAlgorithm(t *testing.T) {
	m, err := ParseMenuWith("c.yaml", []byte(strings.Replace(dimuonMenu, "muons_n_hard", "n_hard", 1)), testRegistry())
	if err != nil {
		t.Fatal(err)
	}
	checkAlgorithm(t, m.Features.Collections[0].Algorithm, lanternGrid())
}
