package detector

import (
	"math"
	"math/rand/v2"
	"testing"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if !(math.Abs(got-want) <= tol) {
		t.Errorf("%s = %.7g, want %.7g +- %.2g", what, got, want, tol)
	}
}

// p_T[GeV] = 0.299792458 z B[T] R[m] and the sagitta s = L^2/(8R): PDG
// review "Particle detectors at accelerators", momentum measurement (memory
// for wording); R.K. Bock, W. Krischer, The Data Analysis BriefBook
// (Springer, 1998). Worked values from CHECKS.md (derived).
func TestCurvatureWorkedValues(t *testing.T) {
	near(t, "pT(B=3.8 T, R=1 m)", CurvaturePt(3.8, 1), 1.13921, 5e-6)
	near(t, "R(pT=1.13921, B=3.8)", CurvatureRadius(1.13921, 3.8), 1, 5e-6)
	r := CurvatureRadius(10, 2)
	near(t, "R(pT=10 GeV, B=2 T)", r, 16.678, 5e-4)
	// The worked 7.495 mm is the leading term L^2/(8R); Sagitta is exact,
	// R - sqrt(R^2 - L^2/4) = L^2/(8R) + L^4/(128 R^3) + ...
	near(t, "L^2/(8R) [mm]", 1000/(8*r), 7.495, 5e-4)
	near(t, "sagitta(L=1 m) [mm]", Sagitta(1, r)*1000, 7.495+1000/(128*r*r*r), 5e-4)
	near(t, "sagitta series [mm]", Sagitta(1, r)*1000, 1000/(8*r)+1000/(128*r*r*r), 1e-6)
	if !math.IsNaN(Sagitta(3, 1)) {
		t.Error("a chord longer than the diameter must give NaN")
	}
}

// M^2 = 2 pT1 pT2 (cosh d_eta - cos d_phi) for two massless particles and
// the transverse-mass edge m_T = m_W at pT = MET = m_W/2, d_phi = pi: PDG
// review "Kinematics" (worked edge derived, CHECKS.md).
func TestInvariantAndTransverseMass(t *testing.T) {
	a := PtEtaPhiM(31.4, 0.7, 2.9, 0)
	b := PtEtaPhiM(44.2, -1.3, -0.4, 0)
	want := math.Sqrt(2 * 31.4 * 44.2 * (math.Cosh(0.7+1.3) - math.Cos(2.9+0.4)))
	near(t, "M(a+b)", a.Add(b).M(), want, 1e-9*want)
	near(t, "m_T edge", TransverseMass(MassW/2, 0.3, MassW/2, 0.3+math.Pi), MassW, 1e-9)
	near(t, "m_T collinear", TransverseMass(40, 1, 40, 1), 0, 1e-9)
	near(t, "eta of PtEtaPhiM", a.Eta(), 0.7, 1e-12)
	near(t, "phi of PtEtaPhiM", b.Phi(), -0.4, 1e-12)
	y := PtYPhiM(10, 1.2, 0, 5)
	near(t, "rapidity of PtYPhiM", 0.5*math.Log((y.E+y.Pz)/(y.E-y.Pz)), 1.2, 1e-12)
	near(t, "mass of PtYPhiM", y.M(), 5, 1e-9)
	near(t, "DeltaPhi wraps", DeltaPhi(3, -3), 6-2*math.Pi, 1e-12)
}

// A two-body decay conserves four-momentum and gives each daughter its mass,
// and the rest-frame momentum is p* = sqrt((M^2-(m1+m2)^2)(M^2-(m1-m2)^2))/2M
// (PDG "Kinematics"): for Z -> mu mu at rest, p* = sqrt(M^2/4 - m_mu^2).
func TestTwoBodyDecay(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	z := FourMomentum{E: MassZ}
	m1, m2 := twoBodyDecay(r, z, massMuon, massMuon)
	near(t, "back to back", m1.Add(m2).P(), 0, 1e-9)
	near(t, "p* of Z -> mu mu", m1.P(), math.Sqrt(MassZ*MassZ/4-massMuon*massMuon), 1e-9)
	for i := range 100 {
		parent := PtYPhiM(5+float64(i), 0.1*float64(i)-3, float64(i), 80+float64(i)/10)
		d1, d2 := twoBodyDecay(r, parent, 4.78, 0.1)
		sum := d1.Add(d2)
		for _, v := range [][2]float64{{sum.Px, parent.Px}, {sum.Py, parent.Py}, {sum.Pz, parent.Pz}, {sum.E, parent.E}} {
			if math.Abs(v[0]-v[1]) > 1e-9*parent.E {
				t.Fatalf("decay %d does not conserve momentum: %v vs %v", i, sum, parent)
			}
		}
		near(t, "daughter mass", d1.M(), 4.78, 1e-6)
	}
}
