package detector

import (
	"fmt"
	"strings"
)

// Generator kinds NewGenerator knows.
const (
	GeneratorSimple  = "simple"
	GeneratorPhysics = "physics"
	GeneratorHepMC   = "hepmc"
)

// GeneratorKinds returns the generator kinds, sorted.
func GeneratorKinds() []string { return []string{GeneratorHepMC, GeneratorPhysics, GeneratorSimple} }

// GeneratorConfig selects and sets a crossing generator. The zero value
// selects the toy SimpleGenerator with its defaults.
type GeneratorConfig struct {
	// Kind is "simple", "physics" or "hepmc"; empty means "simple".
	Kind string `yaml:"kind"`
	// Simple sets the toy generator (kind simple).
	Simple SimpleConfig `yaml:"simple"`
	// Physics sets the physics generator (kind physics) and the pile-up
	// overlay of the HepMC reader (kind hepmc).
	Physics PhysicsConfig `yaml:"physics"`
	// HepMCFile is the generator file kind hepmc reads; required for it,
	// refused for the others.
	HepMCFile string `yaml:"hepmc_file"`
}

// Validate checks the settings of the selected kind.
func (c GeneratorConfig) Validate() error {
	switch c.Kind {
	case "", GeneratorSimple:
		if c.HepMCFile != "" {
			return fmt.Errorf("detector: generator hepmc_file is set but kind is %q, not %q", c.kindName(), GeneratorHepMC)
		}
		return c.Simple.Validate()
	case GeneratorPhysics:
		if c.HepMCFile != "" {
			return fmt.Errorf("detector: generator hepmc_file is set but kind is %q, not %q", c.Kind, GeneratorHepMC)
		}
		return c.Physics.Validate()
	case GeneratorHepMC:
		if c.HepMCFile == "" {
			return fmt.Errorf("detector: generator kind %q needs hepmc_file", GeneratorHepMC)
		}
		return c.Physics.Validate()
	}
	return fmt.Errorf("detector: unknown generator kind %q (known: %s)", c.Kind, strings.Join(GeneratorKinds(), ", "))
}

func (c GeneratorConfig) kindName() string {
	if c.Kind == "" {
		return GeneratorSimple
	}
	return c.Kind
}

// NewGenerator builds the generator cfg selects over d, split by part.
func NewGenerator(d *Description, part *Partition, seed uint64, cfg GeneratorConfig) (Generator, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	switch cfg.kindName() {
	case GeneratorPhysics:
		return NewPhysicsGenerator(d, part, seed, cfg.Physics)
	case GeneratorHepMC:
		return LoadHepMCGenerator(d, part, seed, cfg.HepMCFile, cfg.Physics)
	}
	return NewSimpleGenerator(d, part, seed, cfg.Simple)
}

// Compile-time checks that the generators implement Generator.
var (
	_ Generator = (*SimpleGenerator)(nil)
	_ Generator = (*PhysicsGenerator)(nil)
	_ Generator = (*HepMCGenerator)(nil)
)

// MeanPileUp returns the mean number of inelastic interactions per
// crossing the selected generator models on d's filling scheme: the toy
// generator's mu, or for the physics generator and the HepMC reader's
// overlay the configured mu or the one the luminosity gives (PileUpMu),
// each with its defaults, as the generators themselves take them.
func (c GeneratorConfig) MeanPileUp(d *Description) float64 {
	switch c.Kind {
	case "", GeneratorSimple:
		return c.Simple.withDefaults().Mu
	}
	p := c.Physics.withDefaults()
	if p.Mu > 0 {
		return p.Mu
	}
	return PileUpMu(p.Luminosity, p.SigmaInelMb, d.Filling.Colliding(), RevolutionHz)
}
