package detector

import (
	"math"
	"math/rand/v2"
)

// defaultCrossSectionPb holds the cross-sections the generator mixes hard
// processes at, in pb, per process (see docs/physics-model.md for each
// source). Multijet is the cross-section for pT_hat > 20 GeV; the W and Z
// values are per lepton flavour, times branching ratio; the Z one is for
// 66 < m_ll < 116 GeV; the ember pair is invented.
var defaultCrossSectionPb = [numProcesses]float64{
	ProcessMultijet:  4.0e8, // order of magnitude, memory (leading-order QCD 2->2 at 13-14 TeV)
	ProcessWenu:      20620, // 11.83 nb (W+) + 8.79 nb (W-), 13 TeV measurement, memory
	ProcessWmunu:     20620, // lepton universality
	ProcessZee:       1981,  // 13 TeV measurement, memory
	ProcessZmumu:     1981,  // lepton universality
	ProcessTopPair:   832,   // NNLO+NNLL prediction at 13 TeV, memory
	ProcessEmberPair: 0.010, // invented: 10 fb
}

// Kinematic model parameters (invented unless stated; see
// docs/physics-model.md).
const (
	multijetRefPtGeV = 20.0 // the multijet cross-section is quoted above this pT_hat
	jetPtPower       = 5.0  // d sigma/d pT ~ pT^-5 (1 - x_T)^6
	jetXtPower       = 6.0
	jetRapiditySigma = 1.8
	jetSplitChance   = 0.3 // share of 2->2 scatters with a third hard parton
	gluonShare       = 0.6

	bosonPtScaleGeV     = 4.0 // boson pT ~ Gamma(2, scale): mean 8 GeV
	bosonRapiditySigma  = 2.0
	bosonMassWindowGeV  = 30.0 // Breit-Wigner truncated at M +- 30 GeV
	zMassLoGeV          = 66.0 // the Z window of the quoted cross-section
	zMassHiGeV          = 116.0
	recoilRapiditySigma = 2.0

	// wPlusShare is sigma(W+)/sigma(W) = 11.83/(11.83+8.79) (memory).
	wPlusShare = 11.83 / (11.83 + 8.79)

	topPairExtraScaleGeV = 60.0 // m_tt = m_t + m_tbar + Gamma(2, 60 GeV)
	topPairPtScaleGeV    = 15.0
	topPairRapiditySigma = 1.0

	emberExtraFraction  = 0.1 // m_pair = 2 m + Gamma(2, 0.1 m)
	emberPtScaleGeV     = 20.0
	emberRapiditySigma  = 0.8
	defaultEmberMassGeV = 1200.0
	defaultShadeMassGeV = 400.0
	defaultSqrtSGeV     = 14000.0
	defaultJetPtMinGeV  = 20.0
)

// W branching ratios (PDG, memory): e nu, mu nu, tau nu, hadrons.
var wDecayCDF = func() [4]float64 {
	br := [4]float64{0.1071, 0.1063, 0.1138, 0.6741}
	sum := br[0] + br[1] + br[2] + br[3]
	var cdf [4]float64
	acc := 0.0
	for i, b := range br {
		acc += b / sum
		cdf[i] = acc
	}
	cdf[3] = 1
	return cdf
}()

// hardModel makes the hard processes. It is immutable and safe for
// concurrent use.
type hardModel struct {
	sqrtS     float64
	jetPtMin  float64
	emberMass float64
	shadeMass float64
}

// jetSpectrumIntegral returns the integral of pT^-n (1 - 2 pT/sqrt s)^m
// from lo to sqrt(s)/2, by Simpson's rule in ln pT.
func jetSpectrumIntegral(lo, sqrtS float64) float64 {
	hi := sqrtS / 2
	if lo >= hi {
		return 0
	}
	const steps = 4000
	a, b := math.Log(lo), math.Log(hi)
	h := (b - a) / steps
	f := func(u float64) float64 {
		pt := math.Exp(u)
		return math.Pow(pt, 1-jetPtPower) * math.Pow(math.Max(1-2*pt/sqrtS, 0), jetXtPower)
	}
	sum := f(a) + f(b)
	for i := 1; i < steps; i++ {
		w := 2.0
		if i%2 == 1 {
			w = 4
		}
		sum += w * f(a+float64(i)*h)
	}
	return sum * h / 3
}

// object appends a truth object made from four-momentum p.
func object(c *Crossing, k ObjectKind, pdg int32, charge float64, p FourMomentum, hard int) {
	c.Truth.Objects = append(c.Truth.Objects, TruthObject{
		Kind: k, PDG: pdg, Charge: charge, PT: p.Pt(), Eta: p.Eta(), Phi: p.Phi(), Mass: massOf(p), Hard: hard,
	})
}

// generate appends the final-state particles of one process of kind p to
// out and its truth objects to c.
func (h *hardModel) generate(r *rand.Rand, p Process, c *Crossing, out []particle) []particle {
	hard := len(c.Truth.Hard)
	c.Truth.Hard = append(c.Truth.Hard, p)
	switch p {
	case ProcessMultijet:
		return h.multijet(r, c, hard, out)
	case ProcessWenu, ProcessWmunu:
		return h.singleW(r, p == ProcessWmunu, c, hard, out)
	case ProcessZee, ProcessZmumu:
		return h.singleZ(r, p == ProcessZmumu, c, hard, out)
	case ProcessTopPair:
		return h.topPair(r, c, hard, out)
	case ProcessEmberPair:
		return h.emberPair(r, c, hard, out)
	}
	return out
}

// multijet makes a QCD 2->2 scatter: pT_hat from pT^-5 (1 - x_T)^6 above
// the minimum, rapidities Gaussian within the kinematic limit, sometimes a
// third parton split off one of the two. Its first truth object has the
// transverse momentum pT_hat.
func (h *hardModel) multijet(r *rand.Rand, c *Crossing, hard int, out []particle) []particle {
	var pt float64
	for {
		pt = h.jetPtMin * math.Pow(uniformOpen(r), -1/(jetPtPower-1))
		xt := 2 * pt / h.sqrtS
		if xt < 1 && r.Float64() < math.Pow(1-xt, jetXtPower) {
			break
		}
	}
	xt := 2 * pt / h.sqrtS
	var y3, y4 float64
	for try := 0; ; try++ {
		y3, y4 = jetRapiditySigma*r.NormFloat64(), jetRapiditySigma*r.NormFloat64()
		x1 := xt / 2 * (math.Exp(y3) + math.Exp(y4))
		x2 := xt / 2 * (math.Exp(-y3) + math.Exp(-y4))
		if x1 < 1 && x2 < 1 {
			break
		}
		if try == 100 {
			y3, y4 = 0, 0
			break
		}
	}
	phi := (2*r.Float64() - 1) * math.Pi
	partons := [3]FourMomentum{PtYPhiM(pt, y3, phi, 0), PtYPhiM(pt, y4, phi+math.Pi, 0)}
	np := 2
	if r.Float64() < jetSplitChance {
		// Split one parton into two whose three-momenta add up to it:
		// shares z and 1-z along it, opposite transverse kicks.
		// The untouched parton goes first, so that the first truth
		// object of a multijet event always has pT_hat.
		if r.IntN(2) == 0 {
			partons[0], partons[1] = partons[1], partons[0]
		}
		partons[1], partons[2] = splitParton(r, partons[1])
		np = 3
	}
	for i := range np {
		gluon := r.Float64() < gluonShare
		kind, pdg := ObjectGluon, int32(21)
		if !gluon {
			kind, pdg = ObjectQuark, int32(1+r.IntN(4))
			if r.IntN(2) == 0 {
				pdg = -pdg
			}
		}
		object(c, kind, pdg, quarkCharge(pdg), partons[i], hard)
		out = hadronise(r, partons[i], gluon, out)
	}
	return out
}

// splitParton shares p between two massless partons at an opening angle of
// 0.4-1.2 rad.
func splitParton(r *rand.Rand, p FourMomentum) (FourMomentum, FourMomentum) {
	mag := p.P()
	z := 0.15 + 0.35*r.Float64()
	theta := 0.4 + 0.8*r.Float64()
	kt := z * (1 - z) * mag * theta
	// A unit vector transverse to p, at a random angle around it.
	wx, wy, wz := p.Px/mag, p.Py/mag, p.Pz/mag
	ax, ay, az := 0.0, 0.0, 1.0
	if math.Abs(wz) > 0.9 {
		ax, az = 1, 0
	}
	ux, uy, uz := ay*wz-az*wy, az*wx-ax*wz, ax*wy-ay*wx
	un := math.Sqrt(ux*ux + uy*uy + uz*uz)
	ux, uy, uz = ux/un, uy/un, uz/un
	vx, vy, vz := wy*uz-wz*uy, wz*ux-wx*uz, wx*uy-wy*ux
	ang := 2 * math.Pi * r.Float64()
	tx := kt * (math.Cos(ang)*ux + math.Sin(ang)*vx)
	ty := kt * (math.Cos(ang)*uy + math.Sin(ang)*vy)
	tz := kt * (math.Cos(ang)*uz + math.Sin(ang)*vz)
	mk := func(f, s float64) FourMomentum {
		x, y, zz := f*p.Px+s*tx, f*p.Py+s*ty, f*p.Pz+s*tz
		return FourMomentum{x, y, zz, math.Sqrt(x*x + y*y + zz*zz)}
	}
	return mk(z, 1), mk(1-z, -1)
}

// quarkCharge returns the charge of a quark or antiquark code.
func quarkCharge(pdg int32) float64 {
	a, s := pdg, 1.0
	if a < 0 {
		a, s = -a, -1
	}
	switch a {
	case 2, 4, 6:
		return s * 2.0 / 3
	case 1, 3, 5:
		return -s / 3
	}
	return 0
}

// boson returns the four-momentum of a boson of mass m with transverse
// momentum from Gamma(2, scale), Gaussian rapidity within the kinematic
// limit and random azimuth.
func (h *hardModel) boson(r *rand.Rand, m, ptScale, ySigma float64) FourMomentum {
	pt := gammaVariate(r, 2, ptScale)
	ymax := math.Log(h.sqrtS / math.Sqrt(m*m+pt*pt))
	y := ySigma * r.NormFloat64()
	for math.Abs(y) >= ymax {
		y = ySigma * r.NormFloat64()
	}
	return PtYPhiM(pt, y, (2*r.Float64()-1)*math.Pi, m)
}

// recoil hadronises a gluon that balances the transverse momentum of a
// system made with some.
func recoil(r *rand.Rand, sys FourMomentum, c *Crossing, hard int, out []particle) []particle {
	pt := sys.Pt()
	if pt < 1 {
		return out
	}
	g := PtYPhiM(pt, recoilRapiditySigma*r.NormFloat64(), sys.Phi()+math.Pi, 0)
	object(c, ObjectGluon, 21, 0, g, hard)
	return hadronise(r, g, true, out)
}

// lepton appends a final-state lepton (or neutrino) of code pdg and
// records it.
func lepton(c *Crossing, pdg int32, p FourMomentum, hard int, out []particle) []particle {
	var kind ObjectKind
	var charge float64
	cl := classEM
	switch a := abs32(pdg); a {
	case 11:
		kind = ObjectElectron
	case 13:
		kind, cl = ObjectMuon, classMuon
	case 12, 14, 16:
		kind, cl = ObjectNeutrino, classInvisible
	}
	if a := abs32(pdg); a == 11 || a == 13 {
		// A positive code is the negative lepton.
		charge = -1
		if pdg < 0 {
			charge = 1
		}
	}
	object(c, kind, pdg, charge, p, hard)
	return append(out, particle{p: p, pdg: pdg, charge: charge, class: cl})
}

func abs32(x int32) int32 {
	if x < 0 {
		return -x
	}
	return x
}

// singleW makes W -> e nu or mu nu with a Breit-Wigner mass, the boson's
// transverse momentum balanced by a recoil gluon, and an isotropic decay.
func (h *hardModel) singleW(r *rand.Rand, muon bool, c *Crossing, hard int, out []particle) []particle {
	m := breitWignerMass(r, MassW, WidthW, MassW-bosonMassWindowGeV, MassW+bosonMassWindowGeV)
	w := h.boson(r, m, bosonPtScaleGeV, bosonRapiditySigma)
	sign := int32(1) // W+
	if r.Float64() >= wPlusShare {
		sign = -1
	}
	object(c, ObjectW, 24*sign, float64(sign), w, hard)
	out = recoil(r, w, c, hard, out)
	return h.decayW(r, w, sign, muon, c, hard, out, false)
}

// decayW decays a W of charge sign: to e nu or mu nu (muon chooses), or,
// with inclusive set, by the W branching ratios to e, mu, tau or quarks.
func (h *hardModel) decayW(r *rand.Rand, w FourMomentum, sign int32, muon bool, c *Crossing, hard int, out []particle, inclusive bool) []particle {
	mode := 0
	if muon {
		mode = 1
	}
	if inclusive {
		u := r.Float64()
		for mode = 0; mode < 3 && u >= wDecayCDF[mode]; mode++ {
		}
	}
	switch mode {
	case 0, 1:
		code, ml := int32(11), massElectron
		if mode == 1 {
			code, ml = 13, massMuon
		}
		l, nu := twoBodyDecay(r, w, ml, 0)
		// W+ -> l+ nu: the antilepton has the negative code.
		out = lepton(c, -sign*code, l, hard, out)
		return lepton(c, sign*(code+1), nu, hard, out)
	case 2:
		tau, nu := twoBodyDecay(r, w, massTau, 0)
		object(c, ObjectTau, -sign*15, float64(sign), tau, hard)
		out = lepton(c, sign*16, nu, hard, out)
		// Every tau taken as tau -> pi nu_tau (a simplification).
		pi, nut := twoBodyDecay(r, tau, massPion, 0)
		out = append(out, particle{p: pi, pdg: 211 * sign, charge: float64(sign), class: classHadron})
		return lepton(c, -sign*16, nut, hard, out)
	}
	q1, q2 := twoBodyDecay(r, w, 0, 0)
	up, down := int32(2), int32(-1) // W+ -> u dbar (c sbar alike)
	if r.IntN(2) == 1 {
		up, down = 4, -3
	}
	if sign < 0 {
		up, down = -up, -down
	}
	object(c, ObjectQuark, up, quarkCharge(up), q1, hard)
	object(c, ObjectQuark, down, quarkCharge(down), q2, hard)
	out = hadronise(r, q1, false, out)
	return hadronise(r, q2, false, out)
}

// singleZ makes Z -> e e or mu mu in the 66-116 GeV window.
func (h *hardModel) singleZ(r *rand.Rand, muon bool, c *Crossing, hard int, out []particle) []particle {
	m := breitWignerMass(r, MassZ, WidthZ, zMassLoGeV, zMassHiGeV)
	z := h.boson(r, m, bosonPtScaleGeV, bosonRapiditySigma)
	object(c, ObjectZ, 23, 0, z, hard)
	out = recoil(r, z, c, hard, out)
	code, ml := int32(11), massElectron
	if muon {
		code, ml = 13, massMuon
	}
	l1, l2 := twoBodyDecay(r, z, ml, ml)
	out = lepton(c, code, l1, hard, out)
	return lepton(c, -code, l2, hard, out)
}

// topPair makes t tbar, each t -> W b with the W decaying inclusively.
func (h *hardModel) topPair(r *rand.Rand, c *Crossing, hard int, out []particle) []particle {
	lo, hi := MassTop-20, MassTop+20
	m1 := breitWignerMass(r, MassTop, widthTop, lo, hi)
	m2 := breitWignerMass(r, MassTop, widthTop, lo, hi)
	sys := h.boson(r, m1+m2+gammaVariate(r, 2, topPairExtraScaleGeV), topPairPtScaleGeV, topPairRapiditySigma)
	out = recoil(r, sys, c, hard, out)
	t1, t2 := twoBodyDecay(r, sys, m1, m2)
	for i, t := range [2]FourMomentum{t1, t2} {
		sign := int32(1 - 2*i) // t then tbar
		object(c, ObjectTop, 6*sign, float64(sign)*2/3, t, hard)
		mt := t.M()
		mw := breitWignerMass(r, MassW, WidthW, MassW-bosonMassWindowGeV, math.Min(MassW+bosonMassWindowGeV, mt-massBottom-0.1))
		w, b := twoBodyDecay(r, t, mw, massBottom)
		object(c, ObjectW, 24*sign, float64(sign), w, hard)
		object(c, ObjectBQuark, 5*sign, quarkCharge(5*sign), b, hard)
		out = hadronise(r, b, false, out)
		out = h.decayW(r, w, sign, false, c, hard, out, true)
	}
	return out
}

// emberPair makes a pair of the invented embers, each decaying to an up
// quark and the invented invisible shade.
func (h *hardModel) emberPair(r *rand.Rand, c *Crossing, hard int, out []particle) []particle {
	m := h.emberMass
	sys := h.boson(r, 2*m+gammaVariate(r, 2, emberExtraFraction*m), emberPtScaleGeV, emberRapiditySigma)
	out = recoil(r, sys, c, hard, out)
	e1, e2 := twoBodyDecay(r, sys, m, m)
	for i, e := range [2]FourMomentum{e1, e2} {
		sign := int32(1 - 2*i)
		object(c, ObjectEmber, PDGEmber*sign, float64(sign)*2/3, e, hard)
		q, s := twoBodyDecay(r, e, 0, h.shadeMass)
		object(c, ObjectQuark, 2*sign, quarkCharge(2*sign), q, hard)
		object(c, ObjectShade, PDGShade, 0, s, hard)
		out = hadronise(r, q, false, out)
		out = append(out, particle{p: s, pdg: PDGShade, class: classInvisible})
	}
	return out
}
