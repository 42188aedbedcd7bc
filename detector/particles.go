package detector

import "math"

// Particle masses in GeV. W, Z and top are PDG 2024 (S. Navas et al., Phys.
// Rev. D 110, 030001 (2024)), as are the electron and muon masses; the
// widths of W and Z too. The rest are PDG values from memory; see
// docs/physics-model.md.
const (
	massElectron = 0.00051099895
	massMuon     = 0.1056583755
	massTau      = 1.77686 // memory
	massPion     = 0.13957039
	massPi0      = 0.1349768
	massKaon     = 0.493677
	massK0       = 0.497611
	massProton   = 0.93827208816
	massNeutron  = 0.93956542052
	massBottom   = 4.78 // pole mass, memory; only used for decay kinematics

	// MassZ and WidthZ are the Z boson mass and width, GeV (PDG 2024).
	MassZ  = 91.1880
	WidthZ = 2.4955
	// MassW and WidthW are the W boson mass and width, GeV (PDG 2024).
	MassW  = 80.3692
	WidthW = 2.085
	// MassTop is the top-quark mass from direct measurements, GeV (PDG
	// 2024).
	MassTop  = 172.57
	widthTop = 1.42 // memory
)

// Invented particles of the demo scenario's signal: the ember, a heavy
// coloured scalar made in pairs, and the shade, a stable neutral particle
// that escapes. Their codes sit in the range the PDG numbering scheme keeps
// free for new states; they name nothing real.
const (
	PDGEmber = 9900601
	PDGShade = 9900602
)

// class is how a particle interacts with the detector.
type class uint8

const (
	classHadron     class = iota // hadronic shower, mostly in the hadronic layer
	classEM                      // electromagnetic shower in the EM layer
	classMuon                    // minimum-ionising deposit, reaches the muon stations
	classInvisible               // escapes: neutrinos, the invented shade
	classBaryon                  // hadronic shower of a baryon: deposits its kinetic energy
	classAntibaryon              // hadronic shower of an antibaryon: deposits E + m
)

// particle is one final-state particle entering the detector response.
type particle struct {
	p      FourMomentum
	pdg    int32
	charge float64 // units of e
	class  class
}

// species is one entry of the soft-hadron table.
type species struct {
	pdg    int32
	charge float64
	mass   float64
	class  class
	weight float64 // share of produced hadrons
}

// hadronTable is the mix of hadrons the minimum-bias model and the
// hadronisation of partons produce (invented shares, in the spirit of the
// measured particle ratios K/pi ~ 0.12, p/pi ~ 0.05 at LHC energies, from
// memory). Neutral pions decay to two photons before the response; K0
// stands for K0_L, the long-lived half.
var hadronTable = []species{
	{211, +1, massPion, classHadron, 0.28},
	{-211, -1, massPion, classHadron, 0.28},
	{111, 0, massPi0, classHadron, 0.275},
	{321, +1, massKaon, classHadron, 0.035},
	{-321, -1, massKaon, classHadron, 0.035},
	{130, 0, massK0, classHadron, 0.035},
	{2212, +1, massProton, classBaryon, 0.015},
	{-2212, -1, massProton, classAntibaryon, 0.015},
	{2112, 0, massNeutron, classBaryon, 0.015},
	{-2112, 0, massNeutron, classAntibaryon, 0.015},
}

// hadronCDF is the cumulative share of hadronTable, normalised to 1.
var hadronCDF = func() []float64 {
	cdf := make([]float64, len(hadronTable))
	sum := 0.0
	for _, s := range hadronTable {
		sum += s.weight
	}
	acc := 0.0
	for i, s := range hadronTable {
		acc += s.weight / sum
		cdf[i] = acc
	}
	cdf[len(cdf)-1] = 1
	return cdf
}()

// pickHadron returns the hadronTable entry for a uniform u in [0, 1).
func pickHadron(u float64) *species {
	for i, c := range hadronCDF {
		if u < c {
			return &hadronTable[i]
		}
	}
	return &hadronTable[len(hadronTable)-1]
}

// classOf returns how a particle of PDG code pdg interacts, for particles
// read from generator files: photons, electrons and neutral pions shower
// electromagnetically, muons ionise, neutrinos and the lightest
// supersymmetric and invented invisible particles escape, everything else
// showers hadronically.
func classOf(pdg int32) class {
	a := pdg
	if a < 0 {
		a = -a
	}
	switch a {
	case 11, 22, 111:
		// A neutral pion left undecayed by the generator stands for its
		// two nearly collinear photons.
		return classEM
	case 13:
		return classMuon
	case 12, 14, 16, 1000022, 1000039, PDGShade:
		return classInvisible
	case 2212, 2112, 3122, 3112, 3222, 3312, 3322, 3334:
		if pdg < 0 {
			return classAntibaryon
		}
		return classBaryon
	}
	return classHadron
}

// depositEnergy returns the energy a shower of class c leaves in the
// calorimeter: a baryon gives its kinetic energy, an antibaryon also its
// annihilation energy.
func depositEnergy(q particle) float64 {
	switch q.class {
	case classBaryon:
		return math.Max(q.p.E-massOf(q.p), 0)
	case classAntibaryon:
		return q.p.E + massOf(q.p)
	}
	return q.p.E
}

func massOf(p FourMomentum) float64 { return math.Max(p.M(), 0) }
