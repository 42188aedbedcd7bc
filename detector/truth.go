package detector

import (
	"fmt"
	"strings"
)

// Process names a kind of hard process the physics generator can make.
type Process uint8

// The processes, from the most to the least frequent. ProcessMinBias means
// no hard process (only the soft overlay); ProcessHepMC marks events read
// from a generator file.
const (
	ProcessMinBias Process = iota
	ProcessMultijet
	ProcessWenu
	ProcessWmunu
	ProcessZee
	ProcessZmumu
	ProcessTopPair
	ProcessEmberPair
	ProcessHepMC
	numProcesses
)

var processNames = [numProcesses]string{
	"minbias", "multijet", "w-enu", "w-munu", "z-ee", "z-mumu", "top-pair", "ember-pair", "hepmc",
}

// String returns the configuration name of p, such as "z-mumu".
func (p Process) String() string {
	if p < numProcesses {
		return processNames[p]
	}
	return fmt.Sprintf("process(%d)", uint8(p))
}

// ProcessNames returns the names ParseProcess accepts, in process order.
func ProcessNames() []string {
	return append([]string(nil), processNames[:ProcessHepMC]...)
}

// ParseProcess returns the process named s; the error lists the names that
// exist. "hepmc" is not a process one can ask for by name.
func ParseProcess(s string) (Process, error) {
	for i, n := range processNames[:ProcessHepMC] {
		if n == s {
			return Process(i), nil
		}
	}
	return 0, fmt.Errorf("detector: unknown process %q (known: %s)", s, strings.Join(ProcessNames(), ", "))
}

// ObjectKind says what a truth object is.
type ObjectKind uint8

// Truth object kinds. Ember and Shade are the invented particles of the
// demo scenario's signal (see docs/physics-model.md).
const (
	ObjectOther ObjectKind = iota
	ObjectElectron
	ObjectMuon
	ObjectTau
	ObjectNeutrino
	ObjectPhoton
	ObjectQuark // u, d, s, c
	ObjectBQuark
	ObjectGluon
	ObjectW
	ObjectZ
	ObjectTop
	ObjectEmber
	ObjectShade
)

var objectNames = [...]string{"other", "electron", "muon", "tau", "neutrino", "photon", "quark", "b-quark", "gluon", "w", "z", "top", "ember", "shade"}

// String returns a lower-case name of k.
func (k ObjectKind) String() string {
	if int(k) < len(objectNames) {
		return objectNames[k]
	}
	return fmt.Sprintf("object(%d)", uint8(k))
}

// TruthObject is one generated object of a hard process: a lepton, a
// neutrino, a parton before hadronisation, a boson, a top quark or an
// invented particle.
type TruthObject struct {
	Kind   ObjectKind
	PDG    int32   // particle code, PDG numbering scheme (invented codes for Ember, Shade)
	Charge float64 // in units of e
	PT     float64 // GeV
	Eta    float64
	Phi    float64
	Mass   float64 // GeV; for a resonance the mass generated in this event
	// Hard indexes Truth.Hard: the hard process the object belongs to.
	Hard int
}

// Truth is the generator record of one crossing.
type Truth struct {
	// Process is the forced process in forced mode; otherwise the rarest
	// hard process present, or ProcessMinBias.
	Process Process
	// Weight is 1 for a crossing generated at natural rates. In forced
	// mode it is the expected number of interactions of the forced process
	// per colliding crossing, mu*sigma/sigma_inel, so that summing weights
	// and multiplying by the colliding-crossing rate gives the process
	// rate L*sigma. For a HepMC file it is the event's first weight.
	Weight float64
	// Hard lists the hard processes of the crossing in generation order.
	Hard []Process
	// Objects are the generated objects of all hard processes.
	Objects []TruthObject
	// InvisibleX and InvisibleY are the vector sum of the transverse
	// momenta of neutrinos and invented invisible particles (GeV); unlike
	// Crossing.TrueMETx they leave out particles that are merely outside
	// the calorimeter.
	InvisibleX, InvisibleY float64
}

func (t *Truth) reset() {
	t.Process, t.Weight = ProcessMinBias, 0
	t.Hard = t.Hard[:0]
	t.Objects = t.Objects[:0]
	t.InvisibleX, t.InvisibleY = 0, 0
}

// Find returns the first object of kind k, and whether there is one.
func (t *Truth) Find(k ObjectKind) (TruthObject, bool) {
	for _, o := range t.Objects {
		if o.Kind == k {
			return o, true
		}
	}
	return TruthObject{}, false
}
