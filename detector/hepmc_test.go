package detector

import (
	"errors"
	"math"
	"os"
	"slices"
	"strings"
	"testing"
)

// testdata/zmumu.hepmc holds three hand-made Z -> mu mu events in HepMC 2
// IO_GenEvent text: the Z at rest (GeV), boosted with a soft pi+ and a
// photon besides and a weight of 0.5 (GeV), and boosted in MeV units. Each
// dimuon has the PDG 2024 Z mass, 91.1880 GeV, by construction.
const zmumuFile = "testdata/zmumu.hepmc"

func hepmcGen(t testing.TB, seed uint64, cfg PhysicsConfig) (*Description, *HepMCGenerator) {
	t.Helper()
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	g, err := LoadHepMCGenerator(d, part, seed, zmumuFile, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return d, g
}

// Events read with go-hep's hepmc decoder go through the same response: the
// muons' station hits give back the Z mass, units are honoured, weights and
// truth are kept.
func TestHepMCZToMuMu(t *testing.T) {
	d, g := hepmcGen(t, 1, PhysicsConfig{NoPileUp: true})
	if g.Events() != 3 {
		t.Fatalf("%d events, want 3", g.Events())
	}
	wantMuonPt := [3]float64{42.495276, 35.017919, 32.855639} // from the file's momenta
	var c Crossing
	for n := range uint64(3) {
		g.Generate(n, &c)
		if c.Truth.Process != ProcessHepMC || c.Interactions != 1 {
			t.Fatalf("event %d: process %v, %d interactions", n, c.Truth.Process, c.Interactions)
		}
		wantW := 1.0
		if n == 1 {
			wantW = 0.5
		}
		near(t, "weight", c.Truth.Weight, wantW, 0)
		z, ok := c.Truth.Find(ObjectZ)
		if !ok {
			t.Fatalf("event %d: no Z in the truth", n)
		}
		near(t, "truth Z mass", z.Mass, MassZ, 1e-6)
		mu, _ := c.Truth.Find(ObjectMuon)
		near(t, "truth muon pT (MeV file in GeV)", mu.PT, wantMuonPt[n], 1e-5)
		tracks := findMuons(&c, len(d.Geometry.MuonStations), d.Geometry.FieldT)
		if len(tracks) != 2 {
			t.Fatalf("event %d: %d muon tracks from the hits, want 2", n, len(tracks))
		}
		a := PtEtaPhiM(tracks[0].pt, tracks[0].eta, tracks[0].phi, massMuon)
		b := PtEtaPhiM(tracks[1].pt, tracks[1].eta, tracks[1].phi, massMuon)
		near(t, "dimuon mass from hits", a.Add(b).M(), MassZ, 0.5)
		towers := 0
		for _, l := range c.PerSource {
			towers += len(l)
		}
		if towers == 0 {
			t.Errorf("event %d: the muons left no calorimeter deposit", n)
		}
	}
	// Event 2 (index 1) has a 12 GeV photon at phi 2.0, eta -0.32.
	g.Generate(1, &c)
	ie, ip, _ := d.Geometry.Locate(math.Asinh(-4.0/12), 2.0)
	photon := 0.0
	for _, l := range c.PerSource {
		for _, tc := range l {
			if layer, te, tp, _ := d.Geometry.TowerCoords(int(tc.Tower)); layer == LayerEM && abs(te-ie) <= 1 && abs(tp-ip) <= 1 {
				photon += d.Geometry.ET(tc.Counts)
			}
		}
	}
	near(t, "photon E_T", photon, 12, 1)
}

// Crossings from a file are functions of (seed, n); they wrap around the
// events, and pile-up is overlaid when configured.
func TestHepMCDeterministicAndOverlay(t *testing.T) {
	_, g1 := hepmcGen(t, 2, PhysicsConfig{Mu: 20, LibraryEvents: 100})
	_, g2 := hepmcGen(t, 2, PhysicsConfig{Mu: 20, LibraryEvents: 100})
	var a, b Crossing
	for _, n := range []uint64{4, 0, 4} {
		g1.Generate(n, &a)
		g2.Generate(n, &b)
		if !sameCrossing(&a, &b) {
			t.Fatalf("crossing %d differs", n)
		}
		if a.Interactions < 2 {
			t.Errorf("crossing %d: %d interactions, want pile-up", n, a.Interactions)
		}
	}
	g1.Generate(1, &a)
	g1.Generate(4, &b)
	if !slices.Equal(a.Truth.Objects, b.Truth.Objects) || sameCrossing(&a, &b) {
		t.Error("crossing 4 should carry event 1 again with another crossing's randomness")
	}
}

// Bad input gets a clear error, not a panic or a hang.
func TestHepMCBadInput(t *testing.T) {
	d := DefaultDescription()
	part, _ := NewPartition(d.Geometry, 16)
	data, err := os.ReadFile(zmumuFile)
	if err != nil {
		t.Fatal(err)
	}
	text := string(data)
	truncated := text[:strings.Index(text, "E 3 ")]
	for _, tc := range []struct {
		name, input, want string
		is                error
	}{
		{"empty", "", "no events", ErrNoEvents},
		{"no events", "HepMC::Version 2.06.09\nHepMC::IO_GenEvent-START_EVENT_LISTING\nHepMC::IO_GenEvent-END_EVENT_LISTING\n", "no events", ErrNoEvents},
		{"truncated", truncated, "truncated", nil},
		{"garbage", "HepMC::Version 2.06.09\nHepMC::IO_GenEvent-START_EVENT_LISTING\nE 1 x\nHepMC::IO_GenEvent-END_EVENT_LISTING\n", "hepmc event 1", nil},
	} {
		_, err := NewHepMCGenerator(d, part, 1, strings.NewReader(tc.input), PhysicsConfig{NoPileUp: true})
		if err == nil || !strings.Contains(err.Error(), tc.want) || (tc.is != nil && !errors.Is(err, tc.is)) {
			t.Errorf("%s: error %v, want one containing %q", tc.name, err, tc.want)
		}
	}
	// Blank lines are tolerated.
	blank := strings.ReplaceAll(text, "\nV -2", "\n\n  \nV -2")
	g, err := NewHepMCGenerator(d, part, 1, strings.NewReader(blank), PhysicsConfig{NoPileUp: true})
	if err != nil || g.Events() != 3 {
		t.Errorf("blank lines: %v", err)
	}
}
