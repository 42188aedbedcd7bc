package detector

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"
)

func physicsGen(t testing.TB, seed uint64, cfg PhysicsConfig) (*Description, *Partition, *PhysicsGenerator) {
	t.Helper()
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	g, err := NewPhysicsGenerator(d, part, seed, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return d, part, g
}

// mu = L sigma_inel / (n_b f_rev) (definition); the worked values of
// CHECKS.md: L = 1e34 cm^-2 s^-1, 79.5 mb (TOTEM, EPJC 79 (2019) 103), 2808
// bunches, f_rev = 11.2455 kHz (LHC Design Report, memory) give 25.2, and
// 5e34, 81 mb, 2760 bunches about 130.
func TestPileUpMu(t *testing.T) {
	near(t, "mu(1e34, 79.5 mb, 2808)", PileUpMu(1e34, 79.5, 2808, 11245.5), 25.2, 0.05)
	near(t, "mu(5e34, 81 mb, 2760)", PileUpMu(5e34, 81, 2760, 11245.5), 130, 1)

	// From the luminosity, the generator takes n_b from the filling scheme.
	d, _, g := physicsGen(t, 1, PhysicsConfig{Luminosity: 1e34, Force: "minbias", LibraryEvents: 50})
	near(t, "generator mu", g.Mu(), PileUpMu(1e34, 79.5, d.Filling.Colliding(), RevolutionHz), 1e-12)

	// The number of overlaid interactions is Poisson with the worked mean.
	mu := PileUpMu(1e34, 79.5, 2808, 11245.5)
	_, _, g = physicsGen(t, 2, PhysicsConfig{Mu: mu, Force: "minbias", LibraryEvents: 50})
	var c Crossing
	const n = 4000
	s, s2 := 0.0, 0.0
	for i := range uint64(n) {
		g.Generate(i, &c)
		k := float64(c.Interactions)
		s += k
		s2 += k * k
	}
	mean := s / n
	near(t, "mean interactions", mean, mu, 4*math.Sqrt(mu/n))
	near(t, "variance of interactions", s2/n-mean*mean, mu, 0.1*mu)
}

// The minimum-bias model reproduces the values it is built from (see
// docs/physics-model.md): dN_ch/deta = 5.5 at eta = 0 (13 TeV measurements,
// memory) and a mean charged pT of 2 p0/(n-3) = 0.52 GeV for the power law
// pT (1 + pT/p0)^-n.
func TestMinBiasModel(t *testing.T) {
	_, r := testStreams(3, 4)
	const n = 20000
	central, charged := 0, 0
	sumPt := 0.0
	var ps []particle
	for range n {
		ps = minBiasEvent(r, ps[:0])
		for _, q := range ps {
			if q.charge == 0 {
				continue
			}
			charged++
			sumPt += q.p.Pt()
			if math.Abs(q.p.Eta()) < 0.5 {
				central++
			}
		}
	}
	near(t, "dN_ch/deta at eta 0", float64(central)/n, mbChargedDensity/(1+math.Exp(-mbEtaEdge/mbEtaWidth)), 0.05)
	near(t, "mean charged pT", sumPt/float64(charged), 2*mbPtScaleGeV/(mbPtPower-3), 0.01)
}

// The W -> e nu transverse mass m_T^2 = 2 pT MET (1 - cos dphi) ends at the
// W mass (PDG review "Kinematics"; PDG 2024 m_W = 80.3692, Gamma_W = 2.085
// GeV): with the true neutrino it never exceeds the generated W mass, and
// with the true MET the share of events above m_W + k Gamma_W is no larger
// than the Breit-Wigner's share of W masses above it.
func TestWTransverseMassEndPoint(t *testing.T) {
	_, _, g := physicsGen(t, 4, PhysicsConfig{Force: "w-enu", NoPileUp: true})
	var c Crossing
	const n = 6000
	var mts []float64
	for i := range uint64(n) {
		g.Generate(i, &c)
		w, okW := c.Truth.Find(ObjectW)
		e, okE := c.Truth.Find(ObjectElectron)
		nu, okN := c.Truth.Find(ObjectNeutrino)
		if !okW || !okE || !okN {
			t.Fatalf("crossing %d: truth lacks W, electron or neutrino: %+v", i, c.Truth.Objects)
		}
		if e.Charge != w.Charge || e.PDG*w.PDG >= 0 {
			t.Fatalf("W %d (charge %v) decayed to lepton %d (charge %v)", w.PDG, w.Charge, e.PDG, e.Charge)
		}
		if mt := TransverseMass(e.PT, e.Phi, nu.PT, nu.Phi); mt > w.Mass*(1+1e-9) {
			t.Fatalf("m_T(e, nu) = %v above the W mass %v", mt, w.Mass)
		}
		near(t, "invisible = neutrino", math.Hypot(c.Truth.InvisibleX, c.Truth.InvisibleY), nu.PT, 1e-9*nu.PT)
		if math.Abs(e.Eta) > 2.5 {
			continue
		}
		met := math.Hypot(c.TrueMETx, c.TrueMETy)
		mts = append(mts, TransverseMass(e.PT, e.Phi, met, math.Atan2(c.TrueMETy, c.TrueMETx)))
	}
	mg := MassW * WidthW
	lo, hi := MassW-bosonMassWindowGeV, MassW+bosonMassWindowGeV
	t0, t1 := math.Atan((lo*lo-MassW*MassW)/mg), math.Atan((hi*hi-MassW*MassW)/mg)
	for _, k := range []float64{1, 2, 3, 5} {
		edge := MassW + k*WidthW
		above := 0
		for _, m := range mts {
			if m > edge {
				above++
			}
		}
		frac := float64(above) / float64(len(mts))
		bw := (t1 - math.Atan((edge*edge-MassW*MassW)/mg)) / (t1 - t0)
		if frac > bw+4*math.Sqrt(bw/float64(len(mts))) {
			t.Errorf("%.2f%% of events have m_T above m_W + %v Gamma, the W masses only %.2f%%", 100*frac, k, 100*bw)
		}
	}
	// The Jacobian peak sits just below the end point.
	hist := make([]int, 120)
	for _, m := range mts {
		if b := int(m); b >= 0 && b < len(hist) {
			hist[b]++
		}
	}
	peak := 0
	for b := range hist {
		if hist[b] > hist[peak] {
			peak = b
		}
	}
	t.Logf("%d W -> e nu: m_T peak bin %d-%d GeV", len(mts), peak, peak+1)
	if float64(peak) < MassW-6 || float64(peak) > MassW+WidthW {
		t.Errorf("m_T distribution peaks at %d GeV, not just below m_W = %v", peak, MassW)
	}
}

// In forced mode every crossing holds the forced process once, weighted by
// its expected number per crossing mu sigma/sigma_inel (definition of the
// weight); natural-mode multijets appear at their rate.
func TestForcedModeWeightsAndNaturalRates(t *testing.T) {
	const mu = 60.0
	_, _, g := physicsGen(t, 5, PhysicsConfig{Mu: mu, Force: "w-munu", NoPileUp: true})
	want := mu * defaultCrossSectionPb[ProcessWmunu] / (79.5e9)
	near(t, "expected W -> mu nu per crossing", g.ExpectedPerCrossing(ProcessWmunu), want, 1e-15)
	var c Crossing
	for i := range uint64(50) {
		g.Generate(i, &c)
		if c.Truth.Process != ProcessWmunu || c.Truth.Weight != want {
			t.Fatalf("crossing %d: process %v weight %v", i, c.Truth.Process, c.Truth.Weight)
		}
		if n := strings.Count(processList(c.Truth.Hard), "w-munu"); n != 1 {
			t.Fatalf("crossing %d holds %d W -> mu nu", i, n)
		}
		if _, ok := c.Truth.Find(ObjectMuon); !ok {
			t.Fatal("no muon in a W -> mu nu crossing")
		}
	}

	_, _, g = physicsGen(t, 6, PhysicsConfig{Mu: mu, NoPileUp: true})
	lambda := g.ExpectedPerCrossing(ProcessMultijet)
	near(t, "multijet per crossing", lambda, mu*4.0e8/79.5e9, 1e-12)
	const n = 6000
	jets, above40 := 0, 0
	for i := range uint64(n) {
		g.Generate(i, &c)
		for _, p := range c.Truth.Hard {
			if p == ProcessMultijet {
				jets++
			}
		}
		if c.Truth.Weight != 1 {
			t.Fatalf("natural crossing weight %v", c.Truth.Weight)
		}
		// pT_hat is the pT of the first parton of a multijet event.
		for j, o := range c.Truth.Objects {
			if (j == 0 || c.Truth.Objects[j-1].Hard != o.Hard) && c.Truth.Hard[o.Hard] == ProcessMultijet && o.PT > 40 {
				above40++
			}
		}
	}
	near(t, "multijets per crossing", float64(jets)/n, lambda, 5*math.Sqrt(lambda/n))
	// The pT_hat spectrum pT^-5 (1 - x_T)^6: the share above 40 GeV is the
	// ratio of its integrals (our stated model).
	share := jetSpectrumIntegral(40, defaultSqrtSGeV) / jetSpectrumIntegral(20, defaultSqrtSGeV)
	near(t, "multijet share above 40 GeV", float64(above40)/float64(jets), share, 5*math.Sqrt(share/float64(jets)))
}

func processList(ps []Process) string {
	var b strings.Builder
	for _, p := range ps {
		b.WriteString(p.String() + " ")
	}
	return b.String()
}

// Top pairs decay t -> W b with masses around the PDG 2024 values; the
// invented ember pairs leave large missing transverse energy in the
// calorimeter (MET = |minus the vector sum of tower E_T|).
func TestTopAndEmberPairs(t *testing.T) {
	d, _, g := physicsGen(t, 7, PhysicsConfig{Force: "top-pair", NoPileUp: true})
	var c Crossing
	var tops []float64
	for i := range uint64(300) {
		g.Generate(i, &c)
		nt, nw, nb := 0, 0, 0
		for _, o := range c.Truth.Objects {
			switch o.Kind {
			case ObjectTop:
				nt++
				tops = append(tops, o.Mass)
			case ObjectW:
				nw++
			case ObjectBQuark:
				nb++
			}
		}
		if nt != 2 || nw != 2 || nb != 2 {
			t.Fatalf("top pair %d: %d tops, %d W, %d b", i, nt, nw, nb)
		}
	}
	slices.Sort(tops)
	near(t, "median top mass", tops[len(tops)/2], MassTop, 0.3)

	_, _, g = physicsGen(t, 8, PhysicsConfig{Force: "ember-pair", NoPileUp: true})
	var mets, inv []float64
	geo := d.Geometry
	for i := range uint64(300) {
		g.Generate(i, &c)
		if n := strings.Count(processList(c.Truth.Hard), "ember-pair"); n != 1 {
			t.Fatalf("crossing %d holds %d ember pairs", i, n)
		}
		var ex, ey float64
		for _, list := range c.PerSource {
			for _, tc := range list {
				_, ie, ip, _ := geo.TowerCoords(int(tc.Tower))
				et := geo.ET(tc.Counts)
				ex -= et * math.Cos(geo.PhiCentre(ip))
				ey -= et * math.Sin(geo.PhiCentre(ip))
				_ = ie
			}
		}
		mets = append(mets, math.Hypot(ex, ey))
		inv = append(inv, math.Hypot(c.Truth.InvisibleX, c.Truth.InvisibleY))
	}
	slices.Sort(mets)
	slices.Sort(inv)
	t.Logf("ember pairs: median calorimeter MET %.0f GeV, median invisible pT %.0f GeV", mets[150], inv[150])
	if mets[150] < 150 {
		t.Errorf("median calorimeter MET of ember pairs %.0f GeV, want large (> 150)", mets[150])
	}
}

// The same (seed, n) gives the same crossing whatever was generated before
// and in any generator instance; another seed gives another crossing.
func TestPhysicsGeneratorDeterministic(t *testing.T) {
	for _, cfg := range []PhysicsConfig{{Mu: 30, LibraryEvents: 200}, {Mu: 20, Force: "z-mumu", LibraryEvents: 200}} {
		_, _, g1 := physicsGen(t, 9, cfg)
		_, _, g2 := physicsGen(t, 9, cfg)
		var a, b Crossing
		towers, hits := 0, 0
		for _, n := range []uint64{5, 0, 99, 5, 123456789} {
			g1.Generate(n, &a)
			g2.Generate(n, &b)
			if !sameCrossing(&a, &b) {
				t.Fatalf("%+v: crossing %d differs between generators", cfg, n)
			}
			for _, l := range a.PerSource {
				towers += len(l)
			}
			for _, l := range a.MuonHits {
				hits += len(l)
			}
		}
		// Out of order against a fresh instance.
		_, _, g3 := physicsGen(t, 9, cfg)
		g3.Generate(99, &b)
		g1.Generate(7, &a)
		g1.Generate(99, &a)
		if !sameCrossing(&a, &b) {
			t.Fatalf("%+v: crossing 99 depends on what came before", cfg)
		}
		if towers == 0 || (cfg.Force == "z-mumu" && hits == 0) {
			t.Fatalf("%+v: nothing generated (%d towers, %d hits)", cfg, towers, hits)
		}
		_, _, g4 := physicsGen(t, 10, cfg)
		g4.Generate(99, &b)
		if sameCrossing(&a, &b) {
			t.Errorf("%+v: another seed gave the same crossing", cfg)
		}
	}
}

// sameCrossing compares crossings by content (a reused empty slice equals a
// nil one).
func sameCrossing(a, b *Crossing) bool {
	if a.N != b.N || a.Orbit != b.Orbit || a.Bcid != b.Bcid || a.TimestampNs != b.TimestampNs ||
		a.Interactions != b.Interactions || a.TrueMETx != b.TrueMETx || a.TrueMETy != b.TrueMETy ||
		!slices.Equal(a.Saturated, b.Saturated) || !slices.Equal(a.SourceTimestampNs, b.SourceTimestampNs) ||
		len(a.PerSource) != len(b.PerSource) || len(a.MuonHits) != len(b.MuonHits) {
		return false
	}
	for i := range a.PerSource {
		if !slices.Equal(a.PerSource[i], b.PerSource[i]) {
			return false
		}
	}
	for i := range a.MuonHits {
		if !slices.Equal(a.MuonHits[i], b.MuonHits[i]) {
			return false
		}
	}
	ta, tb := a.Truth, b.Truth
	return ta.Process == tb.Process && ta.Weight == tb.Weight && slices.Equal(ta.Hard, tb.Hard) &&
		slices.Equal(ta.Objects, tb.Objects) && ta.InvisibleX == tb.InvisibleX && ta.InvisibleY == tb.InvisibleY
}

// Every source stamps the crossing with its own clock: the nominal time
// plus a fixed offset within +-clock_offset_max_ns plus jitter; the offsets
// differ between sources and stay put from crossing to crossing.
func TestSourceTimestamps(t *testing.T) {
	d, part, g := physicsGen(t, 11, PhysicsConfig{NoPileUp: true, Force: "minbias"})
	rc := d.Config.Readout
	var c Crossing
	const n = 3000
	sum := make([]float64, part.AllSources())
	for i := range uint64(n) {
		g.Generate(i, &c)
		if len(c.SourceTimestampNs) != part.AllSources() {
			t.Fatalf("%d source timestamps, want %d", len(c.SourceTimestampNs), part.AllSources())
		}
		if c.TimestampNs != DefaultClock().Nominal(c.Orbit, c.Bcid) {
			t.Fatal("nominal timestamp is not the clock's")
		}
		for s, ts := range c.SourceTimestampNs {
			dt := float64(ts - c.TimestampNs)
			if math.Abs(dt) > rc.ClockOffsetMaxNs+6*rc.ClockJitterNs+1 {
				t.Fatalf("source %d off by %v ns", s+1, dt)
			}
			sum[s] += dt
			if c.SourceTimestamp(uint32(s+1)) != ts {
				t.Fatal("SourceTimestamp disagrees with SourceTimestampNs")
			}
		}
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range sum {
		lo, hi = min(lo, v/n), max(hi, v/n)
	}
	if hi-lo < 0.5 {
		t.Errorf("source offsets span only %.2f ns; they should differ", hi-lo)
	}
	var simple Crossing
	sg, _ := NewSimpleGenerator(d, part, 1, SimpleConfig{})
	sg.Generate(3, &simple)
	if simple.SourceTimestamp(20) != simple.TimestampNs {
		t.Error("without source clocks every source reports the nominal time")
	}
}

func TestPhysicsConfigValidation(t *testing.T) {
	for _, tc := range []struct {
		cfg  PhysicsConfig
		want string
	}{
		{PhysicsConfig{Force: "higgs"}, "z-mumu"},
		{PhysicsConfig{Mu: -1}, "mu = -1"},
		{PhysicsConfig{CrossSectionsPb: map[string]float64{"z-tautau": 1}}, "z-tautau"},
		{PhysicsConfig{CrossSectionsPb: map[string]float64{"z-ee": math.NaN()}}, "cross_sections_pb.z-ee"},
		{PhysicsConfig{ShadeMassGeV: 2000}, "shade_mass_gev"},
		{PhysicsConfig{LibraryEvents: -3}, "library_events"},
		{PhysicsConfig{Luminosity: 1e36}, "luminosity_cm2s"},
	} {
		err := tc.cfg.Validate()
		if tc.want == "luminosity_cm2s" && err == nil {
			// In range for Validate; too much pile-up once n_b is known.
			d := DefaultDescription()
			part, _ := NewPartition(d.Geometry, 4)
			_, err = NewPhysicsGenerator(d, part, 1, tc.cfg)
		}
		if err == nil || !strings.Contains(err.Error(), tc.want) || !errors.Is(err, ErrBadPhysicsConfig) {
			t.Errorf("%+v: error %v, want one naming %q wrapping ErrBadPhysicsConfig", tc.cfg, err, tc.want)
		}
	}
	if err := (PhysicsConfig{}).Validate(); err != nil {
		t.Errorf("zero config: %v", err)
	}
	if _, err := ParseProcess("nope"); err == nil || !strings.Contains(err.Error(), "ember-pair") {
		t.Errorf("unknown process error %v should list the names", err)
	}
}

func TestGeneratorConfigSelects(t *testing.T) {
	d := DefaultDescription()
	part, _ := NewPartition(d.Geometry, 8)
	for _, tc := range []struct {
		cfg  GeneratorConfig
		want string
	}{
		{GeneratorConfig{}, "*detector.SimpleGenerator"},
		{GeneratorConfig{Kind: "physics", Physics: PhysicsConfig{NoPileUp: true}}, "*detector.PhysicsGenerator"},
		{GeneratorConfig{Kind: "hepmc", HepMCFile: "testdata/zmumu.hepmc", Physics: PhysicsConfig{NoPileUp: true}}, "*detector.HepMCGenerator"},
	} {
		g, err := NewGenerator(d, part, 1, tc.cfg)
		if err != nil {
			t.Fatalf("%+v: %v", tc.cfg, err)
		}
		if got := typeName(g); got != tc.want {
			t.Errorf("%+v built %s, want %s", tc.cfg, got, tc.want)
		}
	}
	for _, tc := range []struct {
		cfg  GeneratorConfig
		want string
	}{
		{GeneratorConfig{Kind: "fancy"}, "hepmc, physics, simple"},
		{GeneratorConfig{Kind: "hepmc"}, "needs hepmc_file"},
		{GeneratorConfig{Kind: "physics", HepMCFile: "x"}, "hepmc_file is set"},
		{GeneratorConfig{Kind: "hepmc", HepMCFile: "testdata/missing.hepmc"}, "missing.hepmc"},
	} {
		if _, err := NewGenerator(d, part, 1, tc.cfg); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%+v: error %v, want one containing %q", tc.cfg, err, tc.want)
		}
	}
}

func typeName(g Generator) string {
	switch g.(type) {
	case *SimpleGenerator:
		return "*detector.SimpleGenerator"
	case *PhysicsGenerator:
		return "*detector.PhysicsGenerator"
	case *HepMCGenerator:
		return "*detector.HepMCGenerator"
	}
	return "?"
}
