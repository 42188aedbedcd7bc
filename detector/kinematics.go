package detector

import "math"

// CurvatureFactor is c/1e9 in GeV per (T m): a particle of unit charge with
// transverse momentum pT [GeV] in a field B [T] moves on a circle of radius
// R [m] = pT / (CurvatureFactor*B) (PDG review "Particle detectors at
// accelerators", momentum measurement).
const CurvatureFactor = 0.299792458

// CurvaturePt returns the transverse momentum in GeV of a unit-charge track
// bending with radius radiusM (m) in a field of fieldT (T).
func CurvaturePt(fieldT, radiusM float64) float64 { return CurvatureFactor * fieldT * radiusM }

// CurvatureRadius returns the bending radius in m of a unit-charge track of
// transverse momentum pt (GeV) in a field of fieldT (T).
func CurvatureRadius(pt, fieldT float64) float64 { return pt / (CurvatureFactor * fieldT) }

// Sagitta returns the sagitta in m of an arc of radius radiusM over a chord
// of chordM: R - sqrt(R^2 - L^2/4), which is L^2/(8R) for L << R. It
// returns NaN for a chord longer than the diameter.
func Sagitta(chordM, radiusM float64) float64 {
	h := chordM / 2
	if h > radiusM {
		return math.NaN()
	}
	// Written to avoid cancellation when the sagitta is tiny.
	return h * h / (radiusM + math.Sqrt(radiusM*radiusM-h*h))
}

// FourMomentum is an energy-momentum four-vector in GeV. The zero value is
// a null vector.
type FourMomentum struct {
	Px, Py, Pz, E float64
}

// PtEtaPhiM returns the four-vector of mass m with transverse momentum pt,
// pseudorapidity eta and azimuth phi.
func PtEtaPhiM(pt, eta, phi, m float64) FourMomentum {
	pz := pt * math.Sinh(eta)
	p2 := pt*pt + pz*pz
	return FourMomentum{Px: pt * math.Cos(phi), Py: pt * math.Sin(phi), Pz: pz, E: math.Sqrt(p2 + m*m)}
}

// PtYPhiM returns the four-vector of mass m with transverse momentum pt,
// rapidity y and azimuth phi.
func PtYPhiM(pt, y, phi, m float64) FourMomentum {
	mt := math.Sqrt(pt*pt + m*m)
	return FourMomentum{Px: pt * math.Cos(phi), Py: pt * math.Sin(phi), Pz: mt * math.Sinh(y), E: mt * math.Cosh(y)}
}

// Add returns p + q.
func (p FourMomentum) Add(q FourMomentum) FourMomentum {
	return FourMomentum{p.Px + q.Px, p.Py + q.Py, p.Pz + q.Pz, p.E + q.E}
}

// Pt returns the transverse momentum.
func (p FourMomentum) Pt() float64 { return math.Hypot(p.Px, p.Py) }

// P returns the magnitude of the three-momentum.
func (p FourMomentum) P() float64 { return math.Sqrt(p.Px*p.Px + p.Py*p.Py + p.Pz*p.Pz) }

// Phi returns the azimuth in (-pi, pi].
func (p FourMomentum) Phi() float64 { return math.Atan2(p.Py, p.Px) }

// Eta returns the pseudorapidity, +-Inf along the beam.
func (p FourMomentum) Eta() float64 {
	pt := p.Pt()
	if pt == 0 {
		return math.Copysign(math.Inf(1), p.Pz)
	}
	return math.Asinh(p.Pz / pt)
}

// M returns the invariant mass (negative for a space-like vector).
func (p FourMomentum) M() float64 {
	m2 := p.E*p.E - p.Px*p.Px - p.Py*p.Py - p.Pz*p.Pz
	if m2 < 0 {
		return -math.Sqrt(-m2)
	}
	return math.Sqrt(m2)
}

// Boost returns p seen in the frame where a particle of four-momentum by
// has the momentum by has here: p is given in that particle's rest frame.
// by must be time-like.
func (p FourMomentum) Boost(by FourMomentum) FourMomentum {
	m := by.M()
	bx, byy, bz := by.Px/m, by.Py/m, by.Pz/m // gamma*beta
	g := by.E / m
	bp := bx*p.Px + byy*p.Py + bz*p.Pz
	f := bp/(g+1) + p.E
	return FourMomentum{
		Px: p.Px + bx*f,
		Py: p.Py + byy*f,
		Pz: p.Pz + bz*f,
		E:  g*p.E + bp,
	}
}

// TransverseMass returns m_T = sqrt(2 pT MET (1 - cos dphi)) of a massless
// lepton and the missing transverse momentum (PDG review "Kinematics"). Its
// distribution ends at the parent's mass.
func TransverseMass(ptLep, phiLep, met, phiMet float64) float64 {
	v := 2 * ptLep * met * (1 - math.Cos(phiLep-phiMet))
	return math.Sqrt(math.Max(v, 0))
}

// DeltaPhi returns a - b folded into [-pi, pi].
func DeltaPhi(a, b float64) float64 {
	d := math.Mod(a-b, 2*math.Pi)
	switch {
	case d > math.Pi:
		d -= 2 * math.Pi
	case d < -math.Pi:
		d += 2 * math.Pi
	}
	return d
}
