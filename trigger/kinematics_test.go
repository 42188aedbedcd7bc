package trigger

import (
	"math"
	"testing"
)

// fourVectorMass computes the invariant mass of two massless objects the
// long way, from E = pT cosh eta, pz = pT sinh eta, px = pT cos phi,
// py = pT sin phi and M^2 = (E1+E2)^2 - |p1+p2|^2, as an independent check
// of the closed form (PDG review "Kinematics").
func fourVectorMass(pt1, eta1, phi1, pt2, eta2, phi2 float64) float64 {
	e := pt1*math.Cosh(eta1) + pt2*math.Cosh(eta2)
	px := pt1*math.Cos(phi1) + pt2*math.Cos(phi2)
	py := pt1*math.Sin(phi1) + pt2*math.Sin(phi2)
	pz := pt1*math.Sinh(eta1) + pt2*math.Sinh(eta2)
	return math.Sqrt(e*e - px*px - py*py - pz*pz)
}

func TestInvariantMass(t *testing.T) {
	// M^2 = 2 pT1 pT2 (cosh d_eta - cos d_phi), PDG review "Kinematics".
	//
	// Back to back at equal eta, each with pT = m_Z/2 = 45.594 GeV:
	// M^2 = 2 (45.594)^2 (cosh 0 - cos pi) = 4 (45.594)^2, so M = 91.188 GeV,
	// the Z mass (PDG 2024: 91.1880 +- 0.0020 GeV).
	if m := InvariantMass(45.594, 0.3, 0, 45.594, 0.3, math.Pi); !near(m, 91.188, 1e-9) {
		t.Errorf("back-to-back Z: M = %v, want 91.188", m)
	}
	// pT 30 and 40 GeV, d_eta = 0.5 - (-0.5) = 1, d_phi = 0.2 - 1.7 = -1.5:
	// M^2 = 2*30*40 (cosh 1 - cos 1.5) = 2400 (1.5430806 - 0.0707372)
	//     = 2400 * 1.4723434 = 3533.6242, so M = 59.444295 GeV.
	m := InvariantMass(30, 0.5, 0.2, 40, -0.5, 1.7)
	if !near(m, 59.44429526501343, 1e-9) {
		t.Errorf("M = %v, want 59.444295", m)
	}
	if fv := fourVectorMass(30, 0.5, 0.2, 40, -0.5, 1.7); !near(m, fv, 1e-9) {
		t.Errorf("closed form %v, four-vector sum %v", m, fv)
	}
	// Collinear massless objects have no mass; rounding must not give NaN.
	if m := InvariantMass(50, 1.1, 0.4, 20, 1.1, 0.4); m != 0 {
		t.Errorf("collinear: M = %v, want 0", m)
	}
}

func TestDeltaPhiWraps(t *testing.T) {
	cases := []struct{ a, b, want float64 }{
		{0.5, 0.2, 0.3},
		{3.0, -3.0, 2*math.Pi - 6}, // across the seam: 6 rad one way, 0.2832 the other
		{-3.0, 3.0, 2*math.Pi - 6},
		{0, math.Pi, math.Pi},
		{0.1, 0.1 + 4*math.Pi, 0},
		{-math.Pi, math.Pi, 0},
	}
	for _, c := range cases {
		if d := DeltaPhi(c.a, c.b); !near(d, c.want, 1e-12) || d < 0 || d > math.Pi {
			t.Errorf("DeltaPhi(%v, %v) = %v, want %v in [0, pi]", c.a, c.b, d, c.want)
		}
	}
	// d_R = sqrt(d_eta^2 + d_phi^2): d_eta = 0.3, d_phi = 0.4 across the
	// seam gives 0.5.
	if r := DeltaR(1.0, math.Pi-0.2, 1.3, -math.Pi+0.2); !near(r, 0.5, 1e-12) {
		t.Errorf("DeltaR = %v, want 0.5", r)
	}
}

func TestWrapPhi(t *testing.T) {
	for _, c := range []struct{ in, want float64 }{
		{0, 0}, {math.Pi, math.Pi}, {-math.Pi, math.Pi}, {math.Pi + 0.1, -math.Pi + 0.1}, {-math.Pi - 0.1, math.Pi - 0.1}, {7 * math.Pi, math.Pi},
	} {
		if got := wrapPhi(c.in); !near(got, c.want, 1e-12) {
			t.Errorf("wrapPhi(%v) = %v, want %v", c.in, got, c.want)
		}
	}
}
