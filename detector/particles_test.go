package detector

import (
	"math"
	"testing"

	"go-hep.org/x/hep/heppdt"
)

// The hadron table's identities against go-hep's particle data table (an
// old generator table: used for codes and charges, and for masses only as
// a loose cross-check; our masses are our own constants).
func TestHadronTableMatchesParticleData(t *testing.T) {
	for _, s := range append(hadronTable,
		species{pdg: 11, charge: -1, mass: massElectron}, species{pdg: 13, charge: -1, mass: massMuon},
		species{pdg: -15, charge: 1, mass: massTau}) {
		p := heppdt.ParticleByID(heppdt.PID(s.pdg))
		if p == nil {
			t.Errorf("code %d unknown to the particle table", s.pdg)
			continue
		}
		if p.Charge != s.charge {
			t.Errorf("%s (%d): charge %v, table %v", p.Name, s.pdg, s.charge, p.Charge)
		}
		if math.Abs(p.Mass-s.mass) > max(1e-3*s.mass, 1e-5) { // the table rounds to 10 keV
			t.Errorf("%s (%d): mass %v, table %v", p.Name, s.pdg, s.mass, p.Mass)
		}
	}
	for pdg, want := range map[int32]float64{2: 2.0 / 3, -1: 1.0 / 3, 5: -1.0 / 3, -4: -2.0 / 3, 21: 0} {
		if got := quarkCharge(pdg); math.Abs(got-heppdt.PID(pdg).Charge()) > 1e-12 || math.Abs(got-want) > 1e-12 {
			t.Errorf("quark %d charge %v", pdg, got)
		}
	}
	// Final-state classes of generator-file particles.
	for pdg, want := range map[int32]class{22: classEM, -11: classEM, 13: classMuon, -14: classInvisible, 211: classHadron, 2212: classBaryon, -2112: classAntibaryon, PDGShade: classInvisible} {
		if got := classOf(pdg); got != want {
			t.Errorf("classOf(%d) = %d, want %d", pdg, got, want)
		}
	}
}
