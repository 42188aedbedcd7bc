package detector

import (
	"math"
	"reflect"
	"testing"
)

// The pseudorapidity identities of the Particle Data Group's review
// "Kinematics": eta = -ln tan(theta/2), cosh eta = 1/sin theta, so
// E_T = E sin theta = E / cosh eta for a massless deposit.
func TestTransverseEnergyMatchesPDGDefinition(t *testing.T) {
	for _, eta := range []float64{-3.9, -2.5, -1, 0, 0.35, 1, 2.5, 3.95} {
		theta := Theta(eta)
		if got := -math.Log(math.Tan(theta / 2)); math.Abs(got-eta) > 1e-12 {
			t.Errorf("eta %v: -ln tan(theta/2) = %v", eta, got)
		}
		e := 123.4
		if got, want := TransverseEnergy(e, eta), e*math.Sin(theta); math.Abs(got-want) > 1e-12*e {
			t.Errorf("eta %v: E_T = %v, E sin theta = %v", eta, got, want)
		}
	}
	// Worked values from CHECKS.md (derived from the identity): eta = 1 gives
	// theta = 40.395 deg and E_T/E = 0.648054; eta = 2.5 gives 9.385 deg.
	if got := Theta(1) * 180 / math.Pi; math.Abs(got-40.395) > 5e-4 {
		t.Errorf("theta(1) = %.4f deg, want 40.395", got)
	}
	if got := TransverseEnergy(1, 1); math.Abs(got-0.648054) > 5e-7 {
		t.Errorf("E_T/E at eta 1 = %.7f, want 0.648054", got)
	}
	if got := Theta(2.5) * 180 / math.Pi; math.Abs(got-9.385) > 5e-4 {
		t.Errorf("theta(2.5) = %.4f deg, want 9.385", got)
	}
}

func TestLanternGeometry(t *testing.T) {
	g := Lantern()
	// DESIGN.md section 11: towers of 0.1 x 2pi/64 over |eta| < 4.0, two layers.
	if g.EtaBins != 80 || g.PhiBins != 64 || g.Towers() != 2*80*64 {
		t.Fatalf("grid %dx%d, %d towers", g.EtaBins, g.PhiBins, g.Towers())
	}
	for idx := 0; idx < g.Towers(); idx++ {
		l, ie, ip, ok := g.TowerCoords(idx)
		if !ok || g.TowerIndex(l, ie, ip) != idx {
			t.Fatalf("index %d does not round-trip", idx)
		}
		ie2, ip2, ok := g.Locate(g.EtaCentre(ie), g.PhiCentre(ip))
		if !ok || ie2 != ie || ip2 != ip {
			t.Fatalf("centre of (%d,%d) locates to (%d,%d)", ie, ip, ie2, ip2)
		}
	}
	if _, _, ok := g.Locate(4.0, 0); ok {
		t.Error("eta 4.0 should be outside the acceptance")
	}
	if _, ip, _ := g.Locate(0, math.Pi+0.01); ip != 0 {
		t.Errorf("phi just above pi wraps to bin %d, want 0", ip)
	}
	if n, sat := g.Counts(1.0); n != 4 || sat {
		t.Errorf("1 GeV = %d counts (sat %v), want 4 at 0.25 GeV per count", n, sat)
	}
	if n, sat := g.Counts(5000); n != g.MaxCount || !sat {
		t.Errorf("5000 GeV = %d counts (sat %v), want saturation", n, sat)
	}
}

func TestFillingScheme(t *testing.T) {
	d := DefaultDescription()
	fs := d.Filling
	if fs.Colliding() != 2400 {
		t.Fatalf("colliding bunches %d, want 2400", fs.Colliding())
	}
	prevOrbit, prevBcid := uint64(0), uint32(0)
	for n := uint64(0); n < 3*uint64(fs.Colliding()); n++ {
		o, b := fs.Crossing(n)
		if !fs.Collides(b) {
			t.Fatalf("crossing %d at empty slot %d", n, b)
		}
		if n > 0 && (o < prevOrbit || (o == prevOrbit && b <= prevBcid)) {
			t.Fatalf("crossing %d (%d,%d) not after (%d,%d)", n, o, b, prevOrbit, prevBcid)
		}
		prevOrbit, prevBcid = o, b
	}
	// f_rev = 11.2455 kHz (CHECKS.md, LHC Design Report, memory) times n_b.
	if got := fs.CrossingRateHz(); math.Abs(got-2400*11245.5) > 1e-6 {
		t.Errorf("crossing rate %v", got)
	}
	_, err := NewFillingScheme(FillingConfig{Blocks: []TrainBlock{{Repeat: 100, Bunches: 40, Gap: 0}}})
	if err == nil {
		t.Error("a scheme longer than the orbit must be refused")
	}
}

func TestClock(t *testing.T) {
	c := DefaultClock()
	// 1/(3564 * 11245.5 Hz) = 24.9500 ns (CHECKS.md: 3564 slots of 24.95 ns).
	if math.Abs(c.SlotNs-24.95) > 0.001 {
		t.Fatalf("slot %v ns", c.SlotNs)
	}
	if got := c.Nominal(1, 0); got != int64(math.Round(3564*c.SlotNs)) {
		t.Errorf("orbit 1 starts at %d ns", got)
	}
}

func TestPartitionBalanced(t *testing.T) {
	g := Lantern()
	for _, n := range []int{1, 2, 3, 16, 128} {
		p, err := NewPartition(g, n)
		if err != nil {
			t.Fatal(err)
		}
		count := make(map[uint32]int)
		for tw := 0; tw < g.Towers(); tw++ {
			count[p.Owner(tw)]++
		}
		if len(count) != n {
			t.Fatalf("%d sources: %d own towers", n, len(count))
		}
		lo, hi := g.Towers(), 0
		for _, c := range count {
			lo, hi = min(lo, c), max(hi, c)
		}
		if float64(hi-lo) > 0.5*float64(g.Towers())/float64(n) {
			t.Errorf("%d sources: shares %d..%d", n, lo, hi)
		}
	}
	if _, err := NewPartition(g, 0); err == nil {
		t.Error("0 sources must be refused")
	}
	if _, err := NewPartition(g, 129); err == nil {
		t.Error("129 sources must be refused")
	}
}

func TestSimpleGeneratorDeterministic(t *testing.T) {
	d := DefaultDescription()
	p, _ := NewPartition(d.Geometry, 16)
	g1, _ := NewSimpleGenerator(d, p, 7, SimpleConfig{})
	g2, _ := NewSimpleGenerator(d, p, 7, SimpleConfig{})
	var a, b Crossing
	towers := 0
	// Generating out of order must give the same crossing: each one has its
	// own random stream.
	for _, n := range []uint64{5, 0, 99, 5} {
		g1.Generate(n, &a)
		g2.Generate(n, &b)
		if !reflect.DeepEqual(a, b) {
			t.Fatalf("crossing %d differs between generators", n)
		}
		for s, list := range a.PerSource {
			for i, tc := range list {
				if p.Owner(int(tc.Tower)) != uint32(s+1) {
					t.Fatalf("tower %d in source %d", tc.Tower, s+1)
				}
				if i > 0 && list[i-1].Tower >= tc.Tower {
					t.Fatalf("source %d towers not ascending", s+1)
				}
				towers++
			}
		}
	}
	if towers == 0 {
		t.Fatal("no towers generated")
	}
	g3, _ := NewSimpleGenerator(d, p, 8, SimpleConfig{})
	g3.Generate(5, &b)
	g1.Generate(5, &a)
	if reflect.DeepEqual(a.PerSource, b.PerSource) {
		t.Error("another seed gave the same crossing")
	}
}

func BenchmarkSimpleGenerator(b *testing.B) {
	d := DefaultDescription()
	p, _ := NewPartition(d.Geometry, 16)
	g, _ := NewSimpleGenerator(d, p, 1, SimpleConfig{})
	var c Crossing
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		g.Generate(uint64(i), &c)
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "crossings/s")
}
