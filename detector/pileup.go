package detector

import (
	"math"
	"math/bits"
	"math/rand/v2"
)

// PileUpMu returns the mean number of inelastic interactions per colliding
// crossing, mu = L sigma_inel / (n_b f_rev), for an instantaneous
// luminosity in cm^-2 s^-1, an inelastic cross-section in mb, n_b colliding
// bunches and a revolution frequency in Hz.
func PileUpMu(luminosityCm2s, sigmaInelMb float64, bunches int, revolutionHz float64) float64 {
	const mbToCm2 = 1e-27
	return luminosityCm2s * sigmaInelMb * mbToCm2 / (float64(bunches) * revolutionHz)
}

// The minimum-bias model: one inelastic interaction makes a negative
// binomial number of hadrons with pseudorapidities from a plateau with soft
// edges and transverse momenta from a power law (see
// docs/physics-model.md for the values and their sources).
const (
	// mbChargedDensity is dN_ch/deta at eta = 0 for inelastic events at 13
	// TeV, about 5.5 (memory of the published measurements).
	mbChargedDensity = 5.5
	// The plateau rho(eta) = rho0 / (1 + exp((|eta| - edge)/width)) extends
	// to edge, with soft edges of width (invented shape).
	mbEtaEdge  = 6.0
	mbEtaWidth = 1.0
	// mbNBDShape is the k of the negative binomial multiplicity
	// distribution (invented, of the size fitted to LHC data).
	mbNBDShape = 2.0
	// The transverse-momentum spectrum dN/dpT ~ pT (1 + pT/p0)^-n gives a
	// mean 2 p0 / (n - 3) = 0.52 GeV (invented values; measured mean pT of
	// charged particles is 0.5-0.6 GeV, memory).
	mbPtScaleGeV = 1.3
	mbPtPower    = 8.0
)

// mbChargedShare is the charged share of hadronTable.
var mbChargedShare = func() float64 {
	all, ch := 0.0, 0.0
	for _, s := range hadronTable {
		all += s.weight
		if s.charge != 0 {
			ch += s.weight
		}
	}
	return ch / all
}()

// mbMeanHadrons is the mean number of hadrons per interaction: the charged
// density integrated over the plateau, 2 rho0 w ln(1 + exp(edge/w)), over
// the charged share.
var mbMeanHadrons = 2 * mbChargedDensity * mbEtaWidth * math.Log1p(math.Exp(mbEtaEdge/mbEtaWidth)) / mbChargedShare

// minBiasEvent appends the final-state particles of one inelastic
// interaction to out.
func minBiasEvent(r *rand.Rand, out []particle) []particle {
	n := negBinomialVariate(r, mbMeanHadrons, mbNBDShape)
	etaGen := mbEtaEdge + 12*mbEtaWidth
	for range n {
		var eta float64
		for {
			eta = (2*r.Float64() - 1) * etaGen
			if r.Float64()*(1+math.Exp((math.Abs(eta)-mbEtaEdge)/mbEtaWidth)) < 1 {
				break
			}
		}
		// pT | lambda ~ Gamma(2, 1/lambda), lambda ~ Gamma(n-2, 1/p0):
		// the mixture is pT (1 + pT/p0)^-n exactly.
		lambda := gammaVariate(r, mbPtPower-2, 1/mbPtScaleGeV)
		pt := (-math.Log(uniformOpen(r)) - math.Log(uniformOpen(r))) / lambda
		phi := (2*r.Float64() - 1) * math.Pi
		s := pickHadron(r.Float64())
		pz := pt * math.Sinh(eta)
		out = appendHadron(r, s, pt*math.Cos(phi), pt*math.Sin(phi), pz, out)
	}
	return out
}

// libDeposit is one tower of a library event: the first tower of its ring
// (the phi bin 0 tower of its layer and eta bin), its phi bin and its E_T,
// in 8 bytes so that the overlay streams little memory.
type libDeposit struct {
	ring0, iphi uint16
	et          float32
}

// minBiasLibrary holds pre-simulated minimum-bias interactions (after the
// detector response, before noise), overlaid on crossings with a random
// choice, a random rotation by whole phi bins and a random mirror in z:
// both are exact symmetries of the tower grid and of the solenoid, so the
// overlay is as good as fresh events while costing one addition per tower
// (common practice of pile-up libraries). It is immutable after
// construction and safe for concurrent use.
type minBiasLibrary struct {
	phiBins int
	// deps[0] holds the events as made, deps[1] mirrored in z; event i
	// owns deps[m][start[i]:start[i+1]].
	deps       [2][]libDeposit
	start      []int32
	metX, metY []float64 // true missing momentum of each event
	cos, sin   []float64 // per rotation by k phi bins
}

// newMinBiasLibrary simulates n interactions with its own random stream.
func newMinBiasLibrary(geo *Geometry, part *Partition, seed uint64, n int) *minBiasLibrary {
	if geo.Towers() > 1<<16 {
		panic("detector: tower grid too large for the pile-up library's 16-bit indices")
	}
	lib := &minBiasLibrary{phiBins: geo.PhiBins, start: make([]int32, 1, n+1)}
	r := rand.New(rand.NewPCG(seed, 0x6d696e6269617321))
	rs := newResponse(geo, part)
	var c Crossing
	var ps []particle
	for range n {
		c.TrueMETx, c.TrueMETy = 0, 0
		ps = minBiasEvent(r, ps[:0])
		for _, q := range ps {
			rs.simulate(r, q, &c)
		}
		for w, word := range rs.hit {
			for word != 0 {
				t := w<<6 | bits.TrailingZeros64(word)
				word &= word - 1
				l, ie, ip, _ := geo.TowerCoords(t)
				et := rs.et[t]
				lib.deps[0] = append(lib.deps[0], libDeposit{ring0: uint16(geo.TowerIndex(l, ie, 0)), iphi: uint16(ip), et: et})
				lib.deps[1] = append(lib.deps[1], libDeposit{ring0: uint16(geo.TowerIndex(l, geo.EtaBins-1-ie, 0)), iphi: uint16(ip), et: et})
			}
		}
		rs.clear()
		lib.start = append(lib.start, int32(len(lib.deps[0])))
		lib.metX = append(lib.metX, c.TrueMETx)
		lib.metY = append(lib.metY, c.TrueMETy)
	}
	lib.cos = make([]float64, geo.PhiBins)
	lib.sin = make([]float64, geo.PhiBins)
	for k := range lib.cos {
		a := float64(k) * 2 * math.Pi / float64(geo.PhiBins)
		lib.cos[k], lib.sin[k] = math.Cos(a), math.Sin(a)
	}
	return lib
}

// overlay adds n library interactions to rs and their missing momentum to c.
func (lib *minBiasLibrary) overlay(r *rand.Rand, n int, rs *response, c *Crossing) {
	events := uint64(len(lib.metX))
	phiBins := lib.phiBins
	et, hit := rs.et, rs.hit
	for range n {
		// One draw picks the event (high bits, by multiply-shift), the
		// rotation (low 32 bits) and the mirror (bit 32); the biases are
		// below 2^-25.
		u := r.Uint64()
		i, _ := bits.Mul64(u, events)
		rot := int((u & 0xffffffff) % uint64(phiBins))
		m := 0
		if u&(1<<32) != 0 {
			m = 1
		}
		deps := lib.deps[m][lib.start[i]:lib.start[i+1]]
		if phiBins&(phiBins-1) == 0 {
			addRotatedMask(et, hit, deps, rot, phiBins-1)
		} else {
			addRotated(et, hit, deps, rot, phiBins)
		}
		cs, sn := lib.cos[rot], lib.sin[rot]
		c.TrueMETx += lib.metX[i]*cs - lib.metY[i]*sn
		c.TrueMETy += lib.metX[i]*sn + lib.metY[i]*cs
	}
}

// addRotatedMask adds deps rotated by rot phi bins, for a power-of-two
// number of phi bins (mask = bins - 1). The loops live in functions of
// their own so that their few variables all stay in registers.
func addRotatedMask(et []float32, hit []uint64, deps []libDeposit, rot, mask int) {
	for _, d := range deps {
		t := int(d.ring0) + (int(d.iphi)+rot)&mask
		et[t] += d.et
		hit[t>>6] |= 1 << (t & 63)
	}
}

// addRotated is addRotatedMask for any number of phi bins; the wrap is
// random, so it is kept free of branches.
func addRotated(et []float32, hit []uint64, deps []libDeposit, rot, phiBins int) {
	for _, d := range deps {
		ip := int(d.iphi) + rot
		ip -= phiBins & ((phiBins - 1 - ip) >> 63)
		t := int(d.ring0) + ip
		et[t] += d.et
		hit[t>>6] |= 1 << (t & 63)
	}
}
