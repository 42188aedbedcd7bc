package detector

import (
	"math"
	"math/bits"
	"math/rand/v2"
	"slices"
)

// Muon deposits in the calorimeter: a most probable energy plus a width
// times a Moyal variate (a Landau-like tail), per layer. Invented values of
// the usual size of a minimum-ionising deposit in a few interaction lengths
// of steel and scintillator, 2-3 GeV (common practice).
const (
	muonEMGeV, muonEMWidthGeV   = 0.30, 0.03
	muonHadGeV, muonHadWidthGeV = 2.00, 0.15
	// hadronEMShareMax bounds the share of a hadron's energy deposited in
	// the EM layer: uniform in [0, hadronEMShareMax], mean 0.3 (invented;
	// it stands for the fluctuating pi0 content of hadronic showers).
	hadronEMShareMax = 0.6
	// Lateral shares below spreadCut of a shower, or below spreadMinGeV of
	// transverse energy, are folded back into the towers kept (energy is
	// conserved): a soft shower then covers one to four towers, a hard one
	// nine.
	spreadCut    = 0.01
	spreadMinGeV = 0.05
)

// response turns final-state particles into tower energies and muon hits
// and digitises them. It holds per-crossing scratch and is not safe for
// concurrent use.
type response struct {
	geo  *Geometry
	part *Partition

	// et is kept in float32: it halves the cache the overlay walks, and a
	// tower sum needs far less than float32's 7 digits.
	et  []float32 // E_T per tower, GeV
	hit []uint64  // bit t set: tower t has a deposit (or a noise value)

	invCosh []float64 // 1/cosh(eta centre) per eta bin
	// Per ring (layer*EtaBins + ieta): the noise rms in E_T, the
	// probability that noise alone reaches the zero-suppression threshold,
	// and that threshold in units of the rms.
	ringSigma, ringP, ringA []float64
	pMax, logQ              float64 // largest ringP and log(1 - pMax)
	thresholdGeV            float64 // zero-suppression threshold in E_T
	emitFloor               float64 // a little below thresholdGeV, to skip Counts safely
	phiStep                 float64
	// Per tower, for the hot loop of readout: the noise rms in E_T (as
	// float32, so exactly what readout uses) and the deposit from which on
	// its noise is drawn, rounded down so that every thinned tower lies at
	// least lowSigmas rms below the threshold (-Inf for a ring without
	// noise: always drawn, with zero noise).
	towerSigma, towerLow []float32
	// Scratch of readout: towers to digitise, towers whose noise is drawn.
	read  []uint64
	drawn []int32
}

func newResponse(geo *Geometry, part *Partition) *response {
	rs := &response{
		geo: geo, part: part,
		et:   make([]float32, geo.Towers()),
		hit:  make([]uint64, (geo.Towers()+63)/64),
		read: make([]uint64, (geo.Towers()+63)/64),
		// One spare slot: readout writes a slot before deciding to keep it.
		drawn:      make([]int32, geo.Towers()+1),
		towerSigma: make([]float32, geo.Towers()),
		towerLow:   make([]float32, geo.Towers()),
		invCosh:    make([]float64, geo.EtaBins),
		phiStep:    2 * math.Pi / float64(geo.PhiBins),
	}
	rs.thresholdGeV = float64(geo.ZeroSuppressionCounts) * geo.LeastCountGeV
	rings := Layers * geo.EtaBins
	rs.ringSigma = make([]float64, rings)
	rs.ringP = make([]float64, rings)
	rs.ringA = make([]float64, rings)
	// Below the threshold by more than float32 rounding: a pre-filter only,
	// Counts decides.
	rs.emitFloor = rs.thresholdGeV * (1 - 1e-6)
	for ie := range rs.invCosh {
		rs.invCosh[ie] = 1 / geo.CoshEta(ie)
	}
	for l := range Layers {
		noise := geo.Layer(l).NoiseGeV
		for ie := range geo.EtaBins {
			k := l*geo.EtaBins + ie
			s := noise * rs.invCosh[ie]
			rs.ringSigma[k] = s
			if s > 0 {
				rs.ringA[k] = rs.thresholdGeV / s
				rs.ringP[k] = 0.5 * math.Erfc(rs.ringA[k]/math.Sqrt2)
				rs.pMax = max(rs.pMax, rs.ringP[k])
			}
		}
	}
	rs.logQ = math.Log1p(-rs.pMax)
	for t := range rs.towerSigma {
		ring := t / geo.PhiBins
		s32 := float32(rs.ringSigma[ring])
		rs.towerSigma[t] = s32
		rs.towerLow[t] = float32(math.Inf(-1))
		if s32 > 0 {
			low := rs.thresholdGeV - lowSigmas*float64(s32)
			l32 := float32(low)
			if float64(l32) > low {
				l32 = math.Nextafter32(l32, float32(math.Inf(-1)))
			}
			rs.towerLow[t] = l32
		}
	}
	return rs
}

// add puts e_T into tower t.
func (rs *response) add(t int, et float64) {
	rs.et[t] += float32(et)
	rs.hit[t>>6] |= 1 << (t & 63)
}

// simulate passes one final-state particle through the detector: showers
// and ionisation in the calorimeter, hits in the muon stations, or escape.
// It adds to c's true missing momentum for particles that escape or lie
// outside the calorimeter.
func (rs *response) simulate(r *rand.Rand, q particle, c *Crossing) {
	pt := q.p.Pt()
	if pt == 0 {
		return // along the beam
	}
	eta := q.p.Eta()
	if q.class == classInvisible || !(math.Abs(eta) < rs.geo.EtaMax) {
		c.TrueMETx += q.p.Px
		c.TrueMETy += q.p.Py
		if q.class == classInvisible {
			c.Truth.InvisibleX += q.p.Px
			c.Truth.InvisibleY += q.p.Py
		}
		return
	}
	phi := q.p.Phi()
	etaPos, phiPos, ok := rs.entry(pt, eta, phi, q.charge, q.p.Pz)
	if !ok {
		return // a looper that never reaches the calorimeter
	}
	switch q.class {
	case classEM:
		e := rs.smear(r, LayerEM, q.p.E)
		rs.shower(LayerEM, etaPos, phiPos, e)
	case classMuon:
		em := muonEMGeV + muonEMWidthGeV*moyalVariate(r)
		had := muonHadGeV + muonHadWidthGeV*moyalVariate(r)
		if e := q.p.E - massMuon; em+had > e {
			// A slow muon stops and leaves what it has.
			em, had = em*e/(em+had), had*e/(em+had)
		}
		rs.shower(LayerEM, etaPos, phiPos, em)
		rs.shower(LayerHad, etaPos, phiPos, had)
		if q.p.P() >= rs.geo.MuonMinMomentumGeV {
			rs.muonHits(r, pt, eta, phi, q.charge, c)
		}
	default:
		e := rs.smear(r, LayerHad, depositEnergy(q))
		f := hadronEMShareMax * r.Float64()
		rs.shower(LayerEM, etaPos, phiPos, f*e)
		rs.shower(LayerHad, etaPos, phiPos, (1-f)*e)
	}
}

// smear draws the measured energy of a shower of true energy e in layer l:
// a gamma variate of mean e and rms e*sqrt(a^2/e + c^2), which stays
// positive for soft showers and tends to a Gaussian for hard ones.
func (rs *response) smear(r *rand.Rand, l int, e float64) float64 {
	if !(e > 0) {
		return 0
	}
	lr := rs.geo.Layer(l)
	rel2 := lr.Stochastic*lr.Stochastic/e + lr.Constant*lr.Constant
	if rel2 == 0 {
		return e
	}
	return gammaVariate(r, 1/rel2, e*rel2)
}

// entry returns where a particle of transverse momentum pt, direction
// (eta, phi) and charge q, made at the origin, meets the calorimeter front:
// the barrel cylinder or an endcap plane. A charged particle moves on a
// helix of radius pT/(0.3 B) (CurvatureFactor); a positive one turns
// clockwise seen from +z, the field pointing along +z. ok is false for a
// particle that never reaches it.
func (rs *response) entry(pt, eta, phi, q, pz float64) (etaPos, phiPos float64, ok bool) {
	rb, ze := rs.geo.InnerRadiusM, rs.geo.EndcapZM
	sh := pz / pt // sinh eta
	if q == 0 || rs.geo.FieldT == 0 {
		return eta, phi, true // a straight line from the origin keeps its direction
	}
	big := CurvatureRadius(pt/math.Abs(q), rs.geo.FieldT) // bending radius, m
	sign := math.Copysign(1, q)
	sBarrel := math.Inf(1)
	if rb < 2*big {
		sBarrel = 2 * big * math.Asin(rb/(2*big))
	}
	sEndcap := math.Inf(1)
	if sh != 0 {
		sEndcap = ze / math.Abs(sh)
	}
	switch {
	case sBarrel <= sEndcap:
		return math.Asinh(sBarrel * sh / rb), phi - sign*math.Asin(rb/(2*big)), true
	case !math.IsInf(sEndcap, 1):
		rad := 2 * big * math.Abs(math.Sin(sEndcap/(2*big)))
		if rad == 0 {
			return 0, 0, false
		}
		return math.Copysign(math.Asinh(ze/rad), pz), phi - sign*sEndcap/(2*big), true
	}
	return 0, 0, false
}

// shower spreads energy e of layer l centred on (eta, phi) over the tower
// hit and its eight neighbours with a Gaussian lateral profile of the
// layer's rms; tails beyond the neighbours go to the neighbours, small
// shares are folded back into the rest (the tower hit is always kept).
func (rs *response) shower(l int, eta, phi, e float64) {
	if !(e > 0) {
		return
	}
	g := rs.geo
	ie, ip, ok := g.Locate(eta, phi)
	if !ok {
		return // it left through the beam hole
	}
	sigma := g.Layer(l).Spread
	if sigma == 0 {
		rs.add(g.TowerIndex(l, ie, ip), e*rs.invCosh[ie])
		return
	}
	// Position inside the tower, in units of the tower size.
	xe := (eta+g.EtaMax)/g.EtaStep - float64(ie)
	pw := math.Mod(phi+math.Pi, 2*math.Pi)
	if pw < 0 {
		pw += 2 * math.Pi
	}
	xp := pw/rs.phiStep - float64(ip)
	fe := sideShares(xe, g.EtaStep/sigma)
	fp := sideShares(xp, rs.phiStep/sigma)
	cut := max(spreadCut, spreadMinGeV/(e*rs.invCosh[ie]))
	var keep [9]float64
	sum := 0.0
	for a := range 3 {
		if e2 := ie + a - 1; e2 < 0 || e2 >= g.EtaBins {
			continue
		}
		for b := range 3 {
			if f := fe[a] * fp[b]; f >= cut || (a == 1 && b == 1) {
				keep[a*3+b] = f
				sum += f
			}
		}
	}
	if sum == 0 {
		return
	}
	for a := range 3 {
		for b := range 3 {
			f := keep[a*3+b]
			if f == 0 {
				continue
			}
			e2 := ie + a - 1
			p2 := (ip + b - 1 + g.PhiBins) % g.PhiBins
			rs.add(g.TowerIndex(l, e2, p2), e*f/sum*rs.invCosh[e2])
		}
	}
}

// sideShares returns the shares of a unit Gaussian profile centred at x in
// [0, 1) of a tower of width 1 that fall below it, in it and above it; k is
// the tower width over the profile rms.
func sideShares(x, k float64) [3]float64 {
	lo := 0.5 * math.Erfc(x*k/math.Sqrt2)     // below the lower edge
	hi := 0.5 * math.Erfc((1-x)*k/math.Sqrt2) // above the upper edge
	return [3]float64{lo, 1 - lo - hi, hi}
}

// muonHits records where a muon crosses each station: on its helix through
// the origin, x = r cos(phi0 - q asin(r/2R)), z = 2R asin(r/2R) sinh(eta),
// smeared by the station resolution, in the sector source that reads it.
func (rs *response) muonHits(r *rand.Rand, pt, eta, phi, q float64, c *Crossing) {
	if rs.part.MuonSources() == 0 || len(c.MuonHits) == 0 {
		return
	}
	big := CurvatureRadius(pt/math.Abs(q), rs.geo.FieldT)
	sign := math.Copysign(1, q)
	sh := math.Sinh(eta)
	for i, st := range rs.geo.MuonStations {
		rad := st.RadiusM
		if rad >= 2*big {
			return // curls up before this station
		}
		half := math.Asin(rad / (2 * big))
		z := 2 * big * half * sh
		if !(math.Abs(math.Asinh(z/rad)) < rs.geo.MuonEtaMax) {
			return // beyond the stations' reach along the beam
		}
		ph := phi - sign*half + st.RPhiResolutionMm*r.NormFloat64()/(rad*1000)
		zmm := z*1000 + st.ZResolutionMm*r.NormFloat64()
		k := rs.part.MuonSector(ph)
		c.MuonHits[k] = append(c.MuonHits[k], MuonHit{
			Station: i, X: rad * 1000 * math.Cos(ph), Y: rad * 1000 * math.Sin(ph), Z: zmm,
		})
	}
}

// lowChance is the candidate probability of the thinning in readout: a
// tower whose deposit lies so far below the zero-suppression threshold that
// noise lifts it over with probability at most lowChance takes that path.
const lowChance = 0.05

// lowSigmas is the number of noise rms below the threshold where the
// thinned path starts: Q(lowSigmas) = lowChance for the standard normal.
var lowSigmas = math.Sqrt2 * math.Erfinv(1-2*lowChance)

// qTable brackets the standard normal tail probability Q(a) on a grid from
// lowSigmas, so that most thinning decisions need no erfc: qTable[k] =
// Q(lowSigmas + k/qTableStep).
var qTable = func() []float64 {
	n := int((qTableMax-lowSigmas)*qTableStep) + 2
	q := make([]float64, n)
	for k := range q {
		q[k] = 0.5 * math.Erfc((lowSigmas+float64(k)/qTableStep)/math.Sqrt2)
	}
	return q
}()

const (
	qTableStep = 64
	qTableMax  = 40 // Q(40) underflows to 0
)

// bernoulliQ reports u < Q(a) for a >= lowSigmas, exactly: the table's
// bracket decides unless u falls inside it.
func bernoulliQ(u, a float64) bool {
	x := (a - lowSigmas) * qTableStep
	if !(x < float64(len(qTable)-1)) {
		return false // Q(a) is 0 in float64
	}
	if x < 0 {
		// Only rounding can bring a thinned tower here.
		return u < 0.5*math.Erfc(a/math.Sqrt2)
	}
	k := int(x)
	switch {
	case u < qTable[k+1]:
		return true
	case u >= qTable[k]:
		return false
	}
	return u < 0.5*math.Erfc(a/math.Sqrt2)
}

// readout adds electronic noise, digitises and zero-suppresses every tower,
// keeping those read out in their source's list (ascending tower order),
// flags saturation and clears the scratch. The noise is exact in
// distribution for independent Gaussian noise per tower, but only drawn
// where it can matter, since a tower below the threshold is never read out:
//   - a tower with a deposit near or above the threshold gets a Gaussian
//     draw;
//   - a tower whose deposit d lies more than lowSigmas rms below the
//     threshold is a candidate with probability lowChance (geometric skips
//     over such towers), kept with probability Q((thr-d)/sigma)/lowChance,
//     and then given d plus a draw from the Gaussian tail above thr-d;
//   - towers without a deposit are found the same way with the largest
//     ring probability of reaching the threshold, thinned to their own
//     ring's, with values from the tail.
//
// It works in passes, so that the hot loops have no unpredictable branch:
// the towers to read get their final E_T in et and a bit in read, and a
// last pass digitises them in tower order. r must draw from f: the hot
// loops take their variates from f directly.
func (rs *response) readout(f *fastRand, r *rand.Rand, c *Crossing) {
	g := rs.geo
	phiBins := g.PhiBins
	thr := rs.thresholdGeV
	et, hit, read := rs.et, rs.hit, rs.read

	// Towers without a deposit.
	if rs.pMax > 0 {
		towers := float64(len(et))
		for t := -1; ; {
			skip := r.ExpFloat64() / -rs.logQ
			if float64(t)+1+skip >= towers {
				break
			}
			t += 1 + int(skip)
			if hit[t>>6]&(1<<(t&63)) != 0 {
				continue // its noise is drawn with its deposit
			}
			ring := t / phiBins
			if p := rs.ringP[ring]; p < rs.pMax && r.Float64()*rs.pMax >= p {
				continue
			}
			et[t] = float32(rs.ringSigma[ring] * normalTailVariate(r, rs.ringA[ring]))
			read[t>>6] |= 1 << (t & 63)
		}
	}

	// Towers with a deposit: sort them into drawn and thinned. Skips are
	// geometric, floor(E / -ln(1-p)) for E exponential, counted down on
	// thinned towers only.
	lowRate := -math.Log1p(-lowChance)
	skip := int(r.ExpFloat64() / lowRate)
	drawn, towerLow, towerSigma := rs.drawn, rs.towerLow, rs.towerSigma
	n := 0
	for w, word := range hit {
		if word == 0 {
			continue
		}
		hit[w] = 0
		for word != 0 {
			t := w<<6 | bits.TrailingZeros64(word)
			word &= word - 1
			d := et[t]
			drawn[n] = int32(t)
			isDrawn := 0
			if d >= towerLow[t] {
				isDrawn = 1
			}
			n += isDrawn
			skip -= 1 - isDrawn
			if skip >= 0 {
				continue
			}
			// A thinned tower picked as candidate.
			skip = int(r.ExpFloat64() / lowRate)
			sigma := float64(towerSigma[t])
			a := (thr - float64(d)) / sigma
			if bernoulliQ(f.float64()*lowChance, a) {
				et[t] = float32(float64(d) + sigma*normalTailVariate(r, a))
				read[t>>6] |= 1 << (t & 63)
			}
		}
	}

	// Drawn towers: add the noise; mark those at or above the threshold.
	floor := float32(rs.emitFloor)
	for _, t := range drawn[:n] {
		v := et[t] + float32(float64(towerSigma[t])*f.norm())
		et[t] = v
		bit := uint64(0)
		if v >= floor {
			bit = 1
		}
		read[t>>6] |= bit << (t & 63)
	}

	// Digitise in tower order.
	for w, word := range read {
		if word == 0 {
			continue
		}
		read[w] = 0
		for word != 0 {
			t := w<<6 | bits.TrailingZeros64(word)
			word &= word - 1
			rs.emit(c, t, float64(et[t]))
		}
	}
	clear(et)
	for k := range c.MuonHits {
		slices.SortStableFunc(c.MuonHits[k], func(a, b MuonHit) int { return a.Station - b.Station })
	}
}

// emit digitises tower t at E_T v and keeps it if it is read out.
func (rs *response) emit(c *Crossing, t int, v float64) {
	n, sat := rs.geo.Counts(v)
	if n < rs.geo.ZeroSuppressionCounts {
		return
	}
	s := rs.part.Owner(t) - 1
	c.PerSource[s] = append(c.PerSource[s], TowerCount{Tower: uint32(t), Counts: n})
	if sat {
		c.Saturated[s] = true
	}
}

// clear empties the scratch without digitising.
func (rs *response) clear() {
	for w, word := range rs.hit {
		for word != 0 {
			rs.et[w<<6|bits.TrailingZeros64(word)] = 0
			word &= word - 1
		}
		rs.hit[w] = 0
	}
}
