package detector

import (
	"math"
	"math/bits"
	"math/rand/v2"
	"testing"
)

// testResponse returns the Lantern geometry, a partition with its muon
// sources and a response over them.
func testResponse(t testing.TB) (*Geometry, *Partition, *response) {
	t.Helper()
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	return d.Geometry, part, newResponse(d.Geometry, part)
}

// testStreams returns a fast generator and a rand.Rand drawing from it.
func testStreams(a, b uint64) (*fastRand, *rand.Rand) {
	f := new(fastRand)
	f.seed(a, b)
	return f, rand.New(f)
}

// newTestCrossing returns a crossing sized for part.
func newTestCrossing(part *Partition) *Crossing {
	var c Crossing
	c.reset(part.CaloSources())
	c.resetMuons(part.MuonSources())
	return &c
}

// clusterEnergy sums the energy (counts * least count * cosh eta) read out
// in a (2w+1) x (2w+1) window of layer l around (ie, ip).
func clusterEnergy(g *Geometry, c *Crossing, l, ie, ip, w int) float64 {
	e := 0.0
	for _, list := range c.PerSource {
		for _, tc := range list {
			tl, te, tp, _ := g.TowerCoords(int(tc.Tower))
			dp := (tp - ip + g.PhiBins) % g.PhiBins
			if dp > g.PhiBins/2 {
				dp -= g.PhiBins
			}
			if tl == l && abs(te-ie) <= w && abs(dp) <= w {
				e += g.ET(tc.Counts) * g.CoshEta(te)
			}
		}
	}
	return e
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// electronAt returns an electron of energy e that, after bending, meets the
// calorimeter at the centre of tower (ie, ip).
func electronAt(g *Geometry, e float64, ie, ip int) particle {
	eta := g.EtaCentre(ie)
	p := math.Sqrt(e*e - massElectron*massElectron)
	pt := p / math.Cosh(eta)
	// A negative particle turns anticlockwise: it lands at phi0 + asin(r/2R).
	phi0 := g.PhiCentre(ip) - math.Asin(g.InnerRadiusM/(2*CurvatureRadius(pt, g.FieldT)))
	return particle{p: PtEtaPhiM(pt, eta, phi0, massElectron), pdg: 11, charge: -1, class: classEM}
}

// The width of the read-out energy of fixed-energy electrons follows
// sigma/E = a/sqrt(E) (+) b/E (+) c (PDG review "Particle detectors at
// accelerators", calorimetry), with Lantern's invented a = 10%, c = 0.7%
// and b the electronic noise of the towers the shower covers; the
// digitisation adds (least count)^2/12 per tower (uniform rounding error).
func TestElectronEnergyResolution(t *testing.T) {
	g, part, rs := testResponse(t)
	f, r := testStreams(21, 22)
	const e, ie, ip = 100.0, 40, 10
	q := electronAt(g, e, ie, ip)

	// Towers of the 3x3 EM window the shower touches (the profile is fixed
	// by the impact point, so this is the same for every electron).
	c := newTestCrossing(part)
	rs.simulate(r, q, c)
	k := 0
	for w, word := range rs.hit {
		for ; word != 0; word &= word - 1 {
			l, te, tp, _ := g.TowerCoords(w<<6 | bits.TrailingZeros64(word))
			if l == LayerEM && abs(te-ie) <= 1 && abs(tp-ip) <= 1 {
				k++
			}
		}
	}
	rs.clear()
	if k == 0 {
		t.Fatal("the electron left nothing in its window")
	}

	const n = 20000
	s, s2 := 0.0, 0.0
	for range n {
		c = newTestCrossing(part)
		rs.simulate(r, q, c)
		rs.readout(f, r, c)
		m := clusterEnergy(g, c, LayerEM, ie, ip, 1)
		s += m
		s2 += m * m
	}
	mean := s / n
	width := math.Sqrt(s2/n-mean*mean) / e
	lc := g.LeastCountGeV * g.CoshEta(ie)
	want := math.Sqrt(math.Pow(g.EM.Resolution(e, k), 2) + float64(k)*lc*lc/12/(e*e))
	t.Logf("100 GeV electrons: %d towers, sigma/E = %.4f%%, formula %.4f%% (a/sqrt(E) (+) b/E (+) c = %.4f%%)",
		k, 100*width, 100*want, 100*g.EM.Resolution(e, k))
	if math.Abs(width/want-1) > 0.03 {
		t.Errorf("sigma/E = %.4f%%, want %.4f%% within 3%%", 100*width, 100*want)
	}
	// Rounding down costs half a count on average.
	near(t, "mean energy", mean, e-lc/2, 0.1)
}

// A hadron's shower energy before digitisation has the hadronic layer's
// a/sqrt(E) (+) c (same PDG review; Lantern's invented 60%, 5%).
func TestHadronShowerResolution(t *testing.T) {
	g, part, rs := testResponse(t)
	_, r := testStreams(23, 24)
	const e = 50.0
	eta := g.EtaCentre(45)
	pt := math.Sqrt(e*e-massPion*massPion) / math.Cosh(eta)
	q := particle{p: PtEtaPhiM(pt, eta, 0.3, massPion), pdg: 211, charge: 1, class: classHadron}
	const n = 20000
	s, s2 := 0.0, 0.0
	for range n {
		c := newTestCrossing(part)
		rs.simulate(r, q, c)
		sum := 0.0
		for w, word := range rs.hit {
			for ; word != 0; word &= word - 1 {
				tw := w<<6 | bits.TrailingZeros64(word)
				_, te, _, _ := g.TowerCoords(tw)
				sum += float64(rs.et[tw]) * g.CoshEta(te)
			}
		}
		rs.clear()
		s += sum
		s2 += sum * sum
	}
	mean := s / n
	near(t, "pion shower mean", mean, e, 0.15)
	width := math.Sqrt(s2/n-mean*mean) / mean
	want := g.Had.Resolution(e, 0)
	if math.Abs(width/want-1) > 0.03 {
		t.Errorf("pion sigma/E = %.4f, want %.4f within 3%%", width, want)
	}
}

// Noise is exact in distribution although it is only drawn where it can
// matter: a tower with a deposit d far below the threshold (thinned path),
// near it (drawn path), or none (tail path) is read out with probability
// Q((thr - d)/sigma) for Gaussian noise of rms sigma (normal distribution),
// and its mean count is that of floor((d + noise)/least count) above it.
func TestNoiseIsExactInDistribution(t *testing.T) {
	g, part, rs := testResponse(t)
	f, r := testStreams(25, 26)
	const ie, ip = 40, 5
	tw := g.TowerIndex(LayerHad, ie, ip)
	sigma := g.Had.NoiseGeV / g.CoshEta(ie)
	q := func(a float64) float64 { return 0.5 * math.Erfc(a/math.Sqrt2) }
	// Expected read-out probability and mean count, by summing the
	// Gaussian over count bins.
	expect := func(d float64) (p, meanCount float64) {
		for n := g.ZeroSuppressionCounts; n < g.ZeroSuppressionCounts+40; n++ {
			lo := (float64(n)*g.LeastCountGeV - d) / sigma
			hi := (float64(n+1)*g.LeastCountGeV - d) / sigma
			pn := q(lo) - q(hi)
			p += pn
			meanCount += float64(n) * pn
		}
		return p, meanCount / p
	}
	paths := map[string]bool{}
	for _, d := range []float64{0, 0.05, 0.15, 0.3, 0.45, 0.6} {
		path := "drawn"
		if d == 0 {
			path = "tail"
		} else if float32(d) < rs.towerLow[tw] {
			path = "thinned"
		}
		paths[path] = true
		const n = 50000
		read, counts := 0, 0.0
		for range n {
			c := newTestCrossing(part)
			if d > 0 {
				rs.add(tw, d)
			}
			rs.readout(f, r, c)
			for _, list := range c.PerSource {
				for _, tc := range list {
					if int(tc.Tower) == tw {
						read++
						counts += float64(tc.Counts)
					}
				}
			}
		}
		p, mc := expect(d)
		got := float64(read) / n
		if math.Abs(got-p) > 5*math.Sqrt(p*(1-p)/n)+1e-5 {
			t.Errorf("d = %v (%s): read out %.5f of the time, want Q((thr-d)/sigma) = %.5f", d, path, got, p)
		}
		if read > 100 {
			near(t, "mean count on the "+path+" path", counts/float64(read), mc, 0.02*mc)
		}
	}
	if len(paths) != 3 {
		t.Errorf("deposits exercised the paths %v, want tail, thinned and drawn", paths)
	}
}

// Empty towers fire at the rate 64 Q(thr/sigma) per ring and crossing.
func TestNoiseTowersPerRing(t *testing.T) {
	g, part, rs := testResponse(t)
	f, r := testStreams(27, 28)
	const n = 20000
	perRing := make([]int, Layers*g.EtaBins)
	for range n {
		c := newTestCrossing(part)
		rs.readout(f, r, c)
		for _, list := range c.PerSource {
			for _, tc := range list {
				perRing[int(tc.Tower)/g.PhiBins]++
			}
		}
	}
	thr := float64(g.ZeroSuppressionCounts) * g.LeastCountGeV
	for _, k := range []int{LayerHad*g.EtaBins + 40, LayerHad*g.EtaBins + 20, LayerEM*g.EtaBins + 39, LayerHad*g.EtaBins + 0} {
		l, ie := k/g.EtaBins, k%g.EtaBins
		sigma := g.Layer(l).NoiseGeV / g.CoshEta(ie)
		want := float64(n*g.PhiBins) * 0.5 * math.Erfc(thr/sigma/math.Sqrt2)
		if d := math.Abs(float64(perRing[k]) - want); d > 5*math.Sqrt(want)+1 {
			t.Errorf("ring (layer %d, ieta %d): %d noise towers in %d crossings, want %.1f", l, ie, perRing[k], n, want)
		}
	}
}

// Charged particles bend in the solenoid and neutral ones do not: at the
// calorimeter radius r the helix through the origin has turned by
// asin(r/2R), R = pT/(0.3 B), clockwise for positive charge with B along
// +z (the Lorentz force q v x B; PDG momentum-measurement formula for R).
func TestChargedParticlesBend(t *testing.T) {
	g, part, rs := testResponse(t)
	_, r := testStreams(29, 30)
	const pt, eta, phi0 = 2.0, 0.05, 0.5
	turn := math.Asin(g.InnerRadiusM / (2 * CurvatureRadius(pt, g.FieldT)))
	for _, tc := range []struct {
		name   string
		charge float64
		pdg    int32
		wantPh float64
	}{
		{"photon", 0, 22, phi0},
		{"positron", 1, -11, phi0 - turn},
		{"electron", -1, 11, phi0 + turn},
	} {
		q := particle{p: PtEtaPhiM(pt, eta, phi0, 0), pdg: tc.pdg, charge: tc.charge, class: classEM}
		c := newTestCrossing(part)
		rs.simulate(r, q, c)
		best, bestET := -1, 0.0
		for w, word := range rs.hit {
			for ; word != 0; word &= word - 1 {
				tw := w<<6 | bits.TrailingZeros64(word)
				if v := float64(rs.et[tw]); v > bestET {
					best, bestET = tw, v
				}
			}
		}
		rs.clear()
		_, ie, ip, _ := g.TowerCoords(best)
		wie, wip, _ := g.Locate(eta, tc.wantPh)
		if ie != wie || ip != wip {
			t.Errorf("%s: shower in tower (%d,%d), want (%d,%d) at phi %.3f", tc.name, ie, ip, wie, wip, tc.wantPh)
		}
	}
}

// Muons leave a minimum-ionising deposit of about 2-3 GeV in the hadronic
// layer (common practice), neutrinos nothing, and both, with particles
// outside the calorimeter, count in the true missing momentum only if they
// escape unseen.
func TestMuonsNeutrinosAndAcceptance(t *testing.T) {
	g, part, rs := testResponse(t)
	_, r := testStreams(31, 32)
	const n = 5000
	had := make([]float64, 0, n)
	for range n {
		c := newTestCrossing(part)
		rs.simulate(r, particle{p: PtEtaPhiM(30, 0.3, 1, massMuon), pdg: 13, charge: -1, class: classMuon}, c)
		sum := 0.0
		for w, word := range rs.hit {
			for ; word != 0; word &= word - 1 {
				tw := w<<6 | bits.TrailingZeros64(word)
				l, te, _, _ := g.TowerCoords(tw)
				if l == LayerHad {
					sum += float64(rs.et[tw]) * g.CoshEta(te)
				}
			}
		}
		rs.clear()
		had = append(had, sum)
		if c.TrueMETx != 0 || c.TrueMETy != 0 {
			t.Fatal("a measured muon must not count as missing momentum")
		}
	}
	mean := 0.0
	for _, v := range had {
		mean += v
	}
	mean /= n
	if mean < 2 || mean > 3 {
		t.Errorf("muon hadronic deposit %.2f GeV, want 2-3", mean)
	}

	c := newTestCrossing(part)
	nu := PtEtaPhiM(25, 0.5, 2, 0)
	rs.simulate(r, particle{p: nu, pdg: 12, class: classInvisible}, c)
	far := PtEtaPhiM(3, 4.4, -1, 0)
	rs.simulate(r, particle{p: far, pdg: 22, class: classEM}, c)
	for _, w := range rs.hit {
		if w != 0 {
			t.Fatal("a neutrino or a particle outside |eta| < 4 left a deposit")
		}
	}
	near(t, "true MET x", c.TrueMETx, nu.Px+far.Px, 1e-12)
	near(t, "true MET y", c.TrueMETy, nu.Py+far.Py, 1e-12)
	near(t, "invisible x", c.Truth.InvisibleX, nu.Px, 1e-12)
}

// A tower above the largest count is clipped at it and its source flagged.
func TestSaturation(t *testing.T) {
	g, part, rs := testResponse(t)
	f, r := testStreams(33, 34)
	c := newTestCrossing(part)
	tw := g.TowerIndex(LayerEM, 40, 3)
	rs.add(tw, 5000)
	rs.readout(f, r, c)
	s := part.Owner(tw) - 1
	if !c.Saturated[s] {
		t.Error("saturated tower not flagged")
	}
	found := false
	for _, tc := range c.PerSource[s] {
		if int(tc.Tower) == tw && tc.Counts == g.MaxCount {
			found = true
		}
	}
	if !found {
		t.Error("saturated tower not clipped at max_count")
	}
	for i, sat := range c.Saturated {
		if sat && i != int(s) {
			t.Errorf("source %d flagged too", i+1)
		}
	}
}
