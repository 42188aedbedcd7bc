package detector

import (
	"math"
	"math/rand/v2"
)

// Hadronisation of a parton into a handful of hadrons, enough for the
// calorimeter to see a jet (an invented independent-fragmentation model; see
// docs/physics-model.md). The mean multiplicity grows with the logarithm of
// the parton energy, faster for gluons; momentum fractions are uniform on
// the simplex; each hadron gets a Gaussian momentum transverse to the
// parton, and the transverse momenta are recentred so that the hadrons'
// three-momenta add up to the parton's.
const (
	fragKappaQuark = 1.6  // mean multiplicity 2 + kappa*ln(1 + E/2 GeV)
	fragKappaGluon = 2.4  // gluon jets carry more particles
	fragKtGeV      = 0.35 // rms of each transverse component
	fragMaxHadrons = 40
)

// hadronise appends the hadrons of parton p (a gluon if gluon is set) to
// out, with neutral pions already decayed to photon pairs.
func hadronise(r *rand.Rand, p FourMomentum, gluon bool, out []particle) []particle {
	mag := p.P()
	if !(mag > 0) {
		return out
	}
	kappa := fragKappaQuark
	if gluon {
		kappa = fragKappaGluon
	}
	mean := 2 + kappa*math.Log1p(p.E/2)
	n := min(1+poissonVariate(r, mean-1), fragMaxHadrons)

	// Orthonormal frame (u, v, w) with w along the parton.
	wx, wy, wz := p.Px/mag, p.Py/mag, p.Pz/mag
	ax, ay, az := 1.0, 0.0, 0.0
	if math.Abs(wx) > 0.9 {
		ax, ay = 0, 1
	}
	ux, uy, uz := ay*wz-az*wy, az*wx-ax*wz, ax*wy-ay*wx
	un := math.Sqrt(ux*ux + uy*uy + uz*uz)
	ux, uy, uz = ux/un, uy/un, uz/un
	vx, vy, vz := wy*uz-wz*uy, wz*ux-wx*uz, wx*uy-wy*ux

	var z, ku, kv [fragMaxHadrons]float64
	zsum, msu, msv := 0.0, 0.0, 0.0
	for i := range n {
		z[i] = -math.Log(uniformOpen(r))
		zsum += z[i]
		ku[i], kv[i] = fragKtGeV*r.NormFloat64(), fragKtGeV*r.NormFloat64()
		msu += ku[i]
		msv += kv[i]
	}
	msu /= float64(n)
	msv /= float64(n)
	for i := range n {
		pl := z[i] / zsum * mag
		a, b := ku[i]-msu, kv[i]-msv
		if n == 1 {
			a, b = 0, 0
		}
		px := pl*wx + a*ux + b*vx
		py := pl*wy + a*uy + b*vy
		pz := pl*wz + a*uz + b*vz
		out = appendHadron(r, pickHadron(r.Float64()), px, py, pz, out)
	}
	return out
}

// appendHadron appends a hadron of species s and momentum (px, py, pz),
// decaying a neutral pion to two photons.
func appendHadron(r *rand.Rand, s *species, px, py, pz float64, out []particle) []particle {
	fm := FourMomentum{px, py, pz, math.Sqrt(px*px + py*py + pz*pz + s.mass*s.mass)}
	if s.pdg == 111 {
		g1, g2 := twoBodyDecay(r, fm, 0, 0)
		return append(out,
			particle{p: g1, pdg: 22, class: classEM},
			particle{p: g2, pdg: 22, class: classEM})
	}
	return append(out, particle{p: fm, pdg: s.pdg, charge: s.charge, class: s.class})
}
