package trigger

import "math"

// DeltaPhi returns the azimuthal separation of two angles, wrapped to
// [0, pi].
func DeltaPhi(phi1, phi2 float64) float64 {
	d := math.Mod(math.Abs(phi1-phi2), 2*math.Pi)
	if d > math.Pi {
		d = 2*math.Pi - d
	}
	return d
}

// DeltaR returns sqrt(d_eta^2 + d_phi^2), with d_phi wrapped as in
// DeltaPhi.
func DeltaR(eta1, phi1, eta2, phi2 float64) float64 {
	return math.Hypot(eta1-eta2, DeltaPhi(phi1, phi2))
}

// InvariantMass returns the invariant mass of two massless objects given
// their transverse momenta (or energies), pseudorapidities and azimuths:
// M^2 = 2 pT1 pT2 (cosh d_eta - cos d_phi). A result below zero from
// rounding is returned as 0.
func InvariantMass(pt1, eta1, phi1, pt2, eta2, phi2 float64) float64 {
	m2 := 2 * pt1 * pt2 * (math.Cosh(eta1-eta2) - math.Cos(phi1-phi2))
	if m2 <= 0 {
		if math.IsNaN(m2) {
			return m2
		}
		return 0
	}
	return math.Sqrt(m2)
}

// wrapPhi maps an angle to (-pi, pi].
func wrapPhi(phi float64) float64 {
	if phi > -math.Pi && phi <= math.Pi {
		return phi
	}
	phi = math.Mod(phi+math.Pi, 2*math.Pi)
	if phi <= 0 {
		phi += 2 * math.Pi
	}
	return phi - math.Pi
}
