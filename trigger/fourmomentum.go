package trigger

import "math"

// FourMomentum is an energy-momentum four-vector in GeV. The zero value
// is the null vector. Its methods follow the conventions of the anti-kt
// clustering (FastJet's): rapidity y next to pseudorapidity, and phi in
// [0, 2pi). It is a plain value, safe to share between goroutines.
type FourMomentum struct {
	Px, Py, Pz, E float64
}

// PtEtaPhi returns the massless four-vector with transverse momentum pt,
// pseudorapidity eta and azimuth phi: a calorimeter tower taken as a
// massless particle, px = pt cos phi, py = pt sin phi, pz = pt sinh eta,
// E = pt cosh eta.
func PtEtaPhi(pt, eta, phi float64) FourMomentum {
	s, c := math.Sincos(phi)
	return FourMomentum{Px: pt * c, Py: pt * s, Pz: pt * math.Sinh(eta), E: pt * math.Cosh(eta)}
}

// Add returns p + q: the E-scheme recombination of two four-vectors.
func (p FourMomentum) Add(q FourMomentum) FourMomentum {
	return FourMomentum{Px: p.Px + q.Px, Py: p.Py + q.Py, Pz: p.Pz + q.Pz, E: p.E + q.E}
}

// Pt2 returns px^2 + py^2.
func (p FourMomentum) Pt2() float64 { return p.Px*p.Px + p.Py*p.Py }

// Pt returns the transverse momentum.
func (p FourMomentum) Pt() float64 { return math.Sqrt(p.Pt2()) }

// M2 returns E^2 - |p|^2, which is negative for a vector outside the light
// cone.
func (p FourMomentum) M2() float64 { return p.E*p.E - (p.Px*p.Px + p.Py*p.Py + p.Pz*p.Pz) }

// M returns the mass, sqrt(M2), and -sqrt(-M2) for a negative M2.
func (p FourMomentum) M() float64 {
	m2 := p.M2()
	if m2 < 0 {
		return -math.Sqrt(-m2)
	}
	return math.Sqrt(m2)
}

// maxRapidity stands in for the rapidity of a vector along the beam with no
// transverse momentum, as FastJet does: such a vector gets
// +-(maxRapidity + |pz|).
const maxRapidity = 1e5

// Rapidity returns y = 1/2 ln((E + pz)/(E - pz)), computed as FastJet
// does: from pt^2 + max(0, m^2) over (E + |pz|)^2, which keeps precision
// at large |y|. A vector with no transverse momentum and E = |pz| gets
// +-(1e5 + |pz|).
func (p FourMomentum) Rapidity() float64 {
	pt2 := p.Pt2()
	if p.E == math.Abs(p.Pz) && pt2 == 0 {
		return math.Copysign(maxRapidity+math.Abs(p.Pz), p.Pz)
	}
	m2 := max(0, p.M2())
	e := p.E + math.Abs(p.Pz)
	y := 0.5 * math.Log((pt2+m2)/(e*e))
	if p.Pz > 0 {
		y = -y
	}
	return y
}

// Phi returns the azimuth in [0, 2pi), and 0 for a vector with no
// transverse momentum.
func (p FourMomentum) Phi() float64 {
	if p.Px == 0 && p.Py == 0 {
		return 0
	}
	phi := math.Atan2(p.Py, p.Px)
	if phi < 0 {
		phi += 2 * math.Pi
	}
	if phi >= 2*math.Pi {
		phi -= 2 * math.Pi
	}
	return phi
}

// Eta returns the pseudorapidity -ln tan(theta/2) = asinh(pz/pt), +-Inf
// along the beam and 0 for the null vector.
func (p FourMomentum) Eta() float64 {
	pt := p.Pt()
	if pt == 0 {
		switch {
		case p.Pz > 0:
			return math.Inf(1)
		case p.Pz < 0:
			return math.Inf(-1)
		}
		return 0
	}
	return math.Asinh(p.Pz / pt)
}

// ET returns the transverse energy E sin(theta) = E pt / |p|, and 0 for a
// vector with no momentum.
func (p FourMomentum) ET() float64 {
	pt := p.Pt()
	if pt == 0 {
		return 0
	}
	return p.E * pt / math.Sqrt(pt*pt+p.Pz*p.Pz)
}
