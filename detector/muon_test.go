package detector

import (
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// fittedTrack is a muon measured from its station hits.
type fittedTrack struct {
	pt, eta, phi, charge, radius float64
}

// fitMuon fits a circle through the origin and the hits (least squares in
// x^2 + y^2 = 2ax + 2by, linear in the centre (a, b)), takes pT = 0.3 B R,
// the charge from the sense of turning, the direction at the origin
// perpendicular to the centre, and sinh(eta) from z against the arc length
// s = 2R asin(r/2R).
func fitMuon(hits []MuonHit, fieldT float64) fittedTrack {
	var sxx, sxy, syy, sxr, syr float64
	for _, h := range hits {
		x, y := h.X/1000, h.Y/1000
		r2 := x*x + y*y
		sxx += x * x
		sxy += x * y
		syy += y * y
		sxr += x * r2
		syr += y * r2
	}
	det := 4 * (sxx*syy - sxy*sxy)
	a := 2 * (sxr*syy - syr*sxy) / det
	b := 2 * (syr*sxx - sxr*sxy) / det
	radius := math.Hypot(a, b)
	phiC := math.Atan2(b, a)
	charge := 1.0
	if DeltaPhi(math.Atan2(hits[0].Y, hits[0].X), phiC) < 0 {
		charge = -1
	}
	phi := phiC + charge*math.Pi/2
	var ssz, sss float64
	for _, h := range hits {
		r := math.Hypot(h.X, h.Y) / 1000
		s := 2 * radius * math.Asin(math.Min(r/(2*radius), 1))
		ssz += s * h.Z / 1000
		sss += s * s
	}
	return fittedTrack{pt: CurvaturePt(fieldT, radius), eta: math.Asinh(ssz / sss), phi: DeltaPhi(phi, 0), charge: charge, radius: radius}
}

// findMuons groups the hits of all muon sources into tracks with one hit
// per station, seeded in the first station and followed by azimuth and
// pseudorapidity, and fits each.
func findMuons(c *Crossing, stations int, fieldT float64) []fittedTrack {
	var all []MuonHit
	for _, list := range c.MuonHits {
		all = append(all, list...)
	}
	var tracks []fittedTrack
	for _, seed := range all {
		if seed.Station != 0 {
			continue
		}
		ph0 := math.Atan2(seed.Y, seed.X)
		eta0 := math.Asinh(seed.Z / math.Hypot(seed.X, seed.Y))
		track := []MuonHit{seed}
		for st := 1; st < stations; st++ {
			best, bestD := -1, 0.1
			for i, h := range all {
				if h.Station != st {
					continue
				}
				d := math.Abs(DeltaPhi(math.Atan2(h.Y, h.X), ph0))
				if de := math.Abs(math.Asinh(h.Z/math.Hypot(h.X, h.Y)) - eta0); de < 0.1 && d < bestD {
					best, bestD = i, d
				}
			}
			if best < 0 {
				break
			}
			track = append(track, all[best])
		}
		if len(track) == stations {
			tracks = append(tracks, fitMuon(track, fieldT))
		}
	}
	return tracks
}

// describe returns the Lantern description with some text replaced.
func describe(t testing.TB, pairs ...string) *Description {
	t.Helper()
	text := string(lanternYAML)
	for i := 0; i < len(pairs); i += 2 {
		if !strings.Contains(text, pairs[i]) {
			t.Fatalf("lantern.yaml has no %q", pairs[i])
		}
		text = strings.ReplaceAll(text, pairs[i], pairs[i+1])
	}
	d, err := ParseDescription("test.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	return d
}

// The stations record a muon where its helix through the origin crosses
// them, and a circle fit to the hits gives back pT = 0.299792458 B R
// (PDG momentum measurement): the worked B = 3.8 T, R = 1 m gives pT =
// 1.13921 GeV (CHECKS.md, derived), for either charge.
func TestMuonHitsRoundTripCurvature(t *testing.T) {
	d := describe(t,
		"field_t: 3.0", "field_t: 3.8",
		"inner_radius_m: 1.5", "inner_radius_m: 0.3",
		"radius_m: 4.2, rphi_resolution_mm: 0.25, z_resolution_mm: 0.5", "radius_m: 0.5",
		"radius_m: 5.2, rphi_resolution_mm: 0.25, z_resolution_mm: 0.5", "radius_m: 1.0",
		"radius_m: 6.2, rphi_resolution_mm: 0.25, z_resolution_mm: 0.5", "radius_m: 1.5",
		"radius_m: 7.2, rphi_resolution_mm: 0.25, z_resolution_mm: 0.5", "radius_m: 1.9",
		"min_momentum_gev: 3.0", "min_momentum_gev: 0")
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	rs := newResponse(d.Geometry, part)
	r := rand.New(rand.NewPCG(41, 42))
	for _, charge := range []float64{1, -1} {
		c := newTestCrossing(part)
		rs.muonHits(r, CurvaturePt(3.8, 1), 0.4, 2.0, charge, c)
		var hits []MuonHit
		for _, list := range c.MuonHits {
			hits = append(hits, list...)
		}
		slices.SortFunc(hits, func(a, b MuonHit) int { return a.Station - b.Station })
		if len(hits) != 4 {
			t.Fatalf("charge %v: %d hits, want 4", charge, len(hits))
		}
		for _, h := range hits {
			r := math.Hypot(h.X, h.Y) / 1000
			near(t, "hit radius", r, d.Geometry.MuonStations[h.Station].RadiusM, 1e-9)
		}
		f := fitMuon(hits, d.Geometry.FieldT)
		near(t, "fitted R [m]", f.radius, 1, 1e-9)
		near(t, "fitted pT [GeV]", f.pt, 1.13921, 5e-6)
		near(t, "fitted charge", f.charge, charge, 0)
		near(t, "fitted phi", f.phi, 2.0, 1e-9)
		near(t, "fitted eta", f.eta, 0.4, 1e-9)
	}
}

// Hits go to the source of their phi sector, sorted by station, and carry
// the station resolution: the residual of the position angle times r has
// the configured rms.
func TestMuonHitsSectorsAndResolution(t *testing.T) {
	g, part, rs := testResponse(t)
	r := rand.New(rand.NewPCG(43, 44))
	const n = 4000
	var res [4][]float64
	for i := range n {
		c := newTestCrossing(part)
		phi := -math.Pi + 2*math.Pi*float64(i)/n
		pt := 20 + float64(i%50)
		rs.muonHits(r, pt, 0.7, phi, 1, c)
		rs.muonHits(r, pt, -0.9, phi+1, -1, c)
		big := CurvatureRadius(pt, g.FieldT)
		for k, list := range c.MuonHits {
			for j, h := range list {
				if part.MuonSector(math.Atan2(h.Y, h.X)) != k {
					t.Fatalf("hit at phi %v in sector source %d", math.Atan2(h.Y, h.X), k)
				}
				if j > 0 && list[j-1].Station > h.Station {
					t.Fatal("hits not sorted by station")
				}
				if h.Z > 0 { // the positive muon
					st := g.MuonStations[h.Station]
					want := phi - math.Asin(st.RadiusM/(2*big))
					res[h.Station] = append(res[h.Station], DeltaPhi(math.Atan2(h.Y, h.X), want)*st.RadiusM*1000)
				}
			}
		}
	}
	for st, list := range res {
		s2 := 0.0
		for _, v := range list {
			s2 += v * v
		}
		near(t, "station rphi rms [mm]", math.Sqrt(s2/float64(len(list))), g.MuonStations[st].RPhiResolutionMm, 0.05*g.MuonStations[st].RPhiResolutionMm)
	}
	// A muon too soft to reach a station leaves no hit there.
	c := newTestCrossing(part)
	rs.muonHits(r, CurvaturePt(g.FieldT, 4.4/2), 0, 0, 1, c)
	for _, list := range c.MuonHits {
		for _, h := range list {
			if h.Station > 0 {
				t.Errorf("a muon curling at 4.4 m reached station %d", h.Station)
			}
		}
	}
}

// Z -> mu mu reconstructed from the station hits alone peaks at the Z mass
// of PDG 2024 (91.1880 GeV, width 2.4955 GeV; S. Navas et al., PRD 110,
// 030001) within its resolution.
func TestZToMuMuPeaksAtZMass(t *testing.T) {
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := NewPhysicsGenerator(d, part, 5, PhysicsConfig{Force: "z-mumu", NoPileUp: true})
	if err != nil {
		t.Fatal(err)
	}
	var c Crossing
	var masses, diffs, truth []float64
	for n := range uint64(3000) {
		gen.Generate(n, &c)
		if c.Truth.Process != ProcessZmumu {
			t.Fatalf("crossing %d has process %v", n, c.Truth.Process)
		}
		z, ok := c.Truth.Find(ObjectZ)
		if !ok {
			t.Fatal("no Z in the truth record")
		}
		truth = append(truth, z.Mass)
		tracks := findMuons(&c, len(d.Geometry.MuonStations), d.Geometry.FieldT)
		if len(tracks) != 2 || tracks[0].charge == tracks[1].charge {
			continue // a muon outside the stations' |eta| < 2.4
		}
		a := PtEtaPhiM(tracks[0].pt, tracks[0].eta, tracks[0].phi, massMuon)
		b := PtEtaPhiM(tracks[1].pt, tracks[1].eta, tracks[1].phi, massMuon)
		m := a.Add(b).M()
		masses = append(masses, m)
		diffs = append(diffs, m-z.Mass)
	}
	if len(masses) < 1500 {
		t.Fatalf("only %d of 3000 Z -> mu mu reconstructed", len(masses))
	}
	median := func(v []float64) float64 {
		w := slices.Clone(v)
		slices.Sort(w)
		return w[len(w)/2]
	}
	// Resolution: 1.4826 times the median absolute deviation of reco -
	// truth (a robust rms).
	abs := make([]float64, len(diffs))
	for i, v := range diffs {
		abs[i] = math.Abs(v - median(diffs))
	}
	reso := 1.4826 * median(abs)
	peak := median(masses)
	// Statistical error of the median of a Breit-Wigner: (pi Gamma/4)/sqrt(N).
	stat := math.Pi * WidthZ / 4 / math.Sqrt(float64(len(masses)))
	t.Logf("%d Z -> mu mu: median mass %.3f GeV, resolution %.3f GeV, truth median %.3f", len(masses), peak, reso, median(truth))
	if math.Abs(peak-MassZ) > reso+3*stat {
		t.Errorf("dimuon peak %.3f GeV, want %.4f within %.3f", peak, MassZ, reso+3*stat)
	}
	near(t, "generated Z median", median(truth), MassZ, 3*math.Pi*WidthZ/4/math.Sqrt(float64(len(truth))))
	if reso > 2 {
		t.Errorf("dimuon resolution %.2f GeV is worse than the Z width", reso)
	}
}
