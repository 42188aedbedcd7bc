package trigger

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// lanternStations are the radii (m) of the demo detector's four muon
// stations.
var lanternStations = []float64{4.2, 5.2, 6.2, 7.2}

// helixHits returns the hits, in mm, of a muon of transverse momentum pt,
// direction (eta, phi) at the beam line, charge q, from z0 (mm), crossing
// stations at the given radii (m) in a field of fieldT along +z. On its
// helix through the origin the azimuth of the point at radius r is
// phi - q asin(r/2R) and its z is z0 + 2R asin(r/2R) sinh(eta), R =
// pT/(0.299792458 B) (PDG "Particle detectors at accelerators"): a
// positive muon turns clockwise seen from +z.
func helixHits(pt, eta, phi float64, q int, z0, fieldT float64, radii []float64) []MuonHit {
	big := pt / (CurvatureGeV * math.Abs(fieldT))
	sign := float64(q)
	if fieldT < 0 {
		sign = -sign
	}
	var hits []MuonHit
	for i, r := range radii {
		if r >= 2*big {
			break
		}
		half := math.Asin(r / (2 * big))
		ph := phi - sign*half
		hits = append(hits, MuonHit{Station: i, X: r * 1000 * math.Cos(ph), Y: r * 1000 * math.Sin(ph), Z: z0 + 2*big*half*math.Sinh(eta)*1000})
	}
	return hits
}

// TestFitMuonTrackWorkedCurvature fits three hits placed on a circle of
// radius R = 1 m through the origin in B = 3.8 T: pT = 0.299792458 * 3.8 *
// 1 = 1.13921 GeV (CHECKS "momentum from curvature", derived from the PDG
// review "Particle detectors at accelerators"). The hits at r = 0.5, 1 and
// 1.5 m lie at azimuth phi0 - asin(r/2) for a positive charge, which bends
// clockwise seen from +z; the negative one is the mirror image.
func TestFitMuonTrackWorkedCurvature(t *testing.T) {
	const phi0, eta = 0.7, 0.4
	for _, q := range []int{1, -1} {
		var hits []MuonHit
		for i, r := range []float64{0.5, 1.0, 1.5} {
			half := math.Asin(r / 2) // on a circle of radius 1 m through the origin
			ph := phi0 - float64(q)*half
			// z = s sinh(eta), s = 2R asin(r/2R) the arc length.
			hits = append(hits, MuonHit{Station: i, X: 1000 * r * math.Cos(ph), Y: 1000 * r * math.Sin(ph), Z: 1000 * 2 * half * math.Sinh(eta)})
		}
		tr, err := FitMuonTrack(hits, 3.8)
		if err != nil {
			t.Fatal(err)
		}
		if !near(tr.PT, 1.13921, 5e-6) || !near(tr.Curvature, 1, 1e-9) {
			t.Errorf("q %d: pT %.6f GeV, curvature %v /m; want 1.13921 GeV, 1 /m", q, tr.PT, tr.Curvature)
		}
		if tr.Charge != q || !near(tr.Phi, phi0, 1e-9) || !near(tr.Eta, eta, 1e-9) || !near(tr.Z0, 0, 1e-6) || tr.Stations != 3 {
			t.Errorf("q %d: %+v, want charge %d, phi %v, eta %v, z0 0", q, tr, q, phi0, eta)
		}
		// The same hits in a field along -z belong to the opposite charge.
		if tr2, _ := FitMuonTrack(hits, -3.8); tr2.Charge != -q || !near(tr2.PT, tr.PT, 1e-12) {
			t.Errorf("q %d in -3.8 T: charge %d pT %v", q, tr2.Charge, tr2.PT)
		}
	}
}

// TestFitMuonTrackSagitta uses the worked sagitta of CHECKS: pT = 10 GeV in
// B = 2 T gives R = 16.678 m, and a chord of L = 1 m a sagitta s = L^2/(8R)
// = 7.495 mm. Hits at the chord's far end and at its middle displaced by s
// (with the beam line at its near end) give back pT = 10 GeV to the
// precision of the rounded sagitta. The arc bulges to +y, so its centre
// lies at -y, to the right of the direction of flight (+x): a clockwise
// turn, a positive charge. Bulging to -y it is negative.
func TestFitMuonTrackSagitta(t *testing.T) {
	hits := []MuonHit{{Station: 0, X: 500, Y: 7.495}, {Station: 1, X: 1000, Y: 0}}
	tr, err := FitMuonTrack(hits, 2)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(tr.PT-10)/10 > 5e-4 || tr.Charge != 1 {
		t.Errorf("pT %.5f GeV charge %d, want 10 GeV and +1", tr.PT, tr.Charge)
	}
	if r := 1 / tr.Curvature; math.Abs(r-16.678) > 0.01 {
		t.Errorf("R %.4f m, want 16.678 m", r)
	}
	hits[0].Y = -7.495
	if tr, _ := FitMuonTrack(hits, 2); tr.Charge != -1 || math.Abs(tr.PT-10)/10 > 5e-4 {
		t.Errorf("mirrored: pT %.5f GeV charge %d, want 10 GeV and -1", tr.PT, tr.Charge)
	}
}

// TestFitMuonTrackLantern fits muons through the four Lantern stations at
// 3 T: hits exactly on the helix give back pT, eta, phi, the charge and
// z0; smeared by 0.25 mm in r-phi and 0.5 mm in z (the stations'
// resolution) a 40 GeV muon is measured to a few per cent.
func TestFitMuonTrackLantern(t *testing.T) {
	for _, c := range []struct {
		pt, eta, phi float64
		q            int
		z0           float64
	}{{40, 0.5, 1, 1, 0}, {40, -2.1, -3.1, -1, 30}, {8, 1.2, 3.1, 1, -20}, {500, 0.1, 0, -1, 0}, {3000, -0.3, 2, 1, 5}} {
		hits := helixHits(c.pt, c.eta, c.phi, c.q, c.z0, 3, lanternStations)
		tr, err := FitMuonTrack(hits, 3)
		if err != nil {
			t.Fatal(err)
		}
		if !near(tr.PT, c.pt, 1e-7*c.pt) || !near(tr.Eta, c.eta, 1e-9) || DeltaPhi(tr.Phi, c.phi) > 1e-9 || tr.Charge != c.q || !near(tr.Z0, c.z0, 1e-6) {
			t.Errorf("%+v: fitted %+v", c, tr)
		}
	}
	rng := rand.New(rand.NewPCG(3, 3))
	var sum, sum2 float64
	const n = 400
	for range n {
		hits := helixHits(40, 0.5, 1, 1, 0, 3, lanternStations)
		for i := range hits {
			r := math.Hypot(hits[i].X, hits[i].Y)
			ph := math.Atan2(hits[i].Y, hits[i].X) + 0.25*rng.NormFloat64()/r
			hits[i].X, hits[i].Y = r*math.Cos(ph), r*math.Sin(ph)
			hits[i].Z += 0.5 * rng.NormFloat64()
		}
		tr, err := FitMuonTrack(hits, 3)
		if err != nil || tr.Charge != 1 {
			t.Fatalf("smeared fit %+v, %v", tr, err)
		}
		sum += tr.PT
		sum2 += tr.PT * tr.PT
	}
	mean := sum / n
	rms := math.Sqrt(sum2/n - mean*mean)
	if math.Abs(mean-40) > 1 || rms > 2 || rms == 0 {
		t.Errorf("smeared 40 GeV muons: mean %.3f GeV rms %.3f GeV", mean, rms)
	}
}

func TestFitMuonTrackErrors(t *testing.T) {
	good := helixHits(40, 0.5, 1, 1, 0, 3, lanternStations)
	for name, c := range map[string]struct {
		hits  []MuonHit
		field float64
	}{
		"one hit":          {good[:1], 3},
		"no field":         {good, 0},
		"NaN field":        {good, math.NaN()},
		"NaN hit":          {append([]MuonHit{{X: math.NaN()}}, good...), 3},
		"hit on the beam":  {append([]MuonHit{{Z: 10}}, good...), 3},
		"hits at one spot": {[]MuonHit{good[0], good[0]}, 3},
	} {
		if _, err := FitMuonTrack(c.hits, c.field); !errors.Is(err, ErrMuonFit) {
			t.Errorf("%s: err %v, want ErrMuonFit", name, err)
		}
	}
}

// muonEvent returns an event with the station hits of the given muons
// (pT, eta, phi, charge) at 3 T, in station order per muon.
func muonEvent(muons ...[4]float64) *Event {
	ev := &Event{LumiSlice: 1}
	for _, m := range muons {
		ev.MuonHits = append(ev.MuonHits, helixHits(m[0], m[1], m[2], int(m[3]), 0, 3, lanternStations)...)
	}
	return ev
}

func muonCollection(t *testing.T, cfg MuonConfig, g Grid, ev *Event) *Collection {
	t.Helper()
	f, err := NewMuonFinder(cfg)
	if err != nil {
		t.Fatal(err)
	}
	var feats Features
	ComputeFeatures(ev, FeatureConfig{Grid: g, Collections: []CollectionConfig{{Name: "muons", Algorithm: f}}}, &feats)
	return feats.Collection("muons")
}

func TestMuonFinder(t *testing.T) {
	// A Z -> mu mu: two muons of 45.594 GeV back to back at eta 0.3, plus
	// a soft one and a hit of noise.
	ev := muonEvent([4]float64{45.594, 0.3, 0.4, 1}, [4]float64{45.594, 0.3, 0.4 - math.Pi, -1}, [4]float64{12, -1.5, 2, 1})
	ev.MuonHits = append(ev.MuonHits, MuonHit{Station: 2, X: -3000, Y: -5000, Z: 9000}, MuonHit{Station: 1, X: math.NaN()})
	// Reverse the order: the result must not depend on it.
	for i, j := 0, len(ev.MuonHits)-1; i < j; i, j = i+1, j-1 {
		ev.MuonHits[i], ev.MuonHits[j] = ev.MuonHits[j], ev.MuonHits[i]
	}
	c := muonCollection(t, MuonConfig{}, Grid{}, ev)
	if c.Len() != 3 {
		t.Fatalf("%d candidates, want 3", c.Len())
	}
	want := [][5]float64{{45.594, 0.3, 0.4, 1, 4}, {45.594, 0.3, 0.4 - math.Pi, -1, 4}, {12, -1.5, 2, 1, 4}}
	for i, w := range want {
		pt, _ := c.Value(i, "pt")
		eta, _ := c.Value(i, "eta")
		phi, _ := c.Value(i, "phi")
		q, _ := c.Value(i, "charge")
		st, _ := c.Value(i, "stations")
		if i < 2 {
			// The two muons of equal pT come in either order.
			if q2, _ := c.Value(0, "charge"); q2 < 0 {
				w = want[1-i]
			}
		}
		if !near(pt, w[0], 1e-6) || !near(eta, w[1], 1e-9) || DeltaPhi(phi, w[2]) > 1e-9 || q != w[3] || st != w[4] {
			t.Errorf("candidate %d: pt %v eta %v phi %v charge %v stations %v, want %v", i, pt, eta, phi, q, st, w)
		}
	}
	// The field comes from the grid: in 1.5 T the same hits mean half the
	// momentum.
	if c := muonCollection(t, MuonConfig{}, Grid{FieldT: 1.5}, ev); c.Len() != 3 || !near(c.At(0, 0), 45.594/2, 1e-6) {
		t.Errorf("at 1.5 T: %d candidates, first pT %v", c.Len(), c.At(0, 0))
	}
	if c := muonCollection(t, MuonConfig{MinPT: 20}, Grid{}, ev); c.Len() != 2 {
		t.Errorf("min_pt 20 GeV: %d candidates, want 2", c.Len())
	}
	// A 5 GeV muon bends out of a narrow road after two stations.
	soft := muonEvent([4]float64{5, 0.2, 1, -1})
	if c := muonCollection(t, MuonConfig{RoadPhi: 0.1}, Grid{}, soft); c.Len() != 1 || c.At(0, 4) != 2 || !near(c.At(0, 0), 5, 1e-6) {
		t.Errorf("soft muon in a narrow road: %d candidates", c.Len())
	}
	if c := muonCollection(t, MuonConfig{RoadPhi: 0.1, MinStations: 3}, Grid{}, soft); c.Len() != 0 {
		t.Errorf("soft muon with 3 stations needed: %d candidates", c.Len())
	}
}

// TestMuonRules runs the muon collection through the expression engine:
// counts with charge conditions, the invariant mass of two candidates and
// an opposite-charge condition.
func TestMuonRules(t *testing.T) {
	m := mustParse(t, `menu: mu
version: 1
features:
  muons: {finder: muon-road, min_pt: 3 GeV}
rules:
  dimuon-z:      {when: "count(muons, pt > 15 GeV) >= 2 and muons[0].charge * muons[1].charge < 0 and mass(muons[0], muons[1]) in 80 GeV .. 100 GeV"}
  two-positive:  {when: "count(muons, pt > 20 GeV and charge == 1) >= 2"}
  one-negative:  {when: "count(muons, pt > 20 GeV and charge == -1) >= 1"}
  same-sign:     {when: "count(muons) >= 2 and muons[0].charge == muons[1].charge"}
  back-to-back:  {when: "dphi(muons[0], muons[1]) > 3 and dr(muons[0], muons[1]) > 3"}
`)
	s := mustSelector(t, m)
	var d Decision
	// M^2 = 2 pT^2 (cosh 0 - cos pi) = (2 pT)^2: 91.188 GeV (PDG
	// "Kinematics").
	s.Decide(muonEvent([4]float64{45.594, 0.3, 0.4, 1}, [4]float64{45.594, 0.3, 0.4 - math.Pi, -1}), &d)
	if want := []bool{true, false, true, false, true}; !equalBools(d.Passed, want) {
		t.Errorf("opposite-charge pair: passed %v, want %v", d.Passed, want)
	}
	s.Decide(muonEvent([4]float64{45.594, 0.3, 0.4, 1}, [4]float64{45.594, 0.3, 0.4 - math.Pi, 1}), &d)
	if want := []bool{false, true, false, true, true}; !equalBools(d.Passed, want) {
		t.Errorf("same-charge pair: passed %v, want %v", d.Passed, want)
	}
	s.Decide(muonEvent([4]float64{45.594, 0.3, 0.4, 1}), &d)
	if want := []bool{false, false, false, false, false}; !equalBools(d.Passed, want) {
		t.Errorf("one muon: passed %v, want %v", d.Passed, want)
	}
}

func equalBools(a, b []bool) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}
