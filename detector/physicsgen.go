package detector

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
)

// PhysicsConfig sets the physics generator. The zero value is usable: it
// makes crossings at the natural mix of processes with the pile-up of the
// default luminosity. docs/physics-model.md states every physics value.
type PhysicsConfig struct {
	// Mu is the mean number of inelastic interactions per colliding
	// crossing; zero means mu = L sigma_inel / (n_b f_rev) from Luminosity,
	// SigmaInelMb and the description's filling scheme.
	Mu float64 `yaml:"mu"`
	// Luminosity is the instantaneous luminosity in cm^-2 s^-1; zero means
	// 1e34.
	Luminosity float64 `yaml:"luminosity_cm2s"`
	// SigmaInelMb is the inelastic cross-section in mb; zero means 79.5 mb
	// (TOTEM, EPJC 79 (2019) 103, measured at 13 TeV).
	SigmaInelMb float64 `yaml:"sigma_inel_mb"`
	// NoPileUp turns the minimum-bias overlay off (weights still use Mu).
	NoPileUp bool `yaml:"no_pileup"`
	// Force names a process put into every crossing exactly once (for
	// efficiency studies; the crossing's weight then says how often it
	// really happens). Empty means the natural mix; "minbias" means no hard
	// processes at all. See ProcessNames.
	Force string `yaml:"force"`
	// JetPtMinGeV is the lowest pT_hat of multijet events; zero means 20
	// GeV. Raising it lowers their cross-section along the spectrum.
	JetPtMinGeV float64 `yaml:"jet_pt_min_gev"`
	// CrossSectionsPb overrides cross-sections by process name, in pb (for
	// multijet: above 20 GeV of pT_hat); a process not named keeps its
	// default.
	CrossSectionsPb map[string]float64 `yaml:"cross_sections_pb"`
	// EmberMassGeV and ShadeMassGeV are the masses of the invented signal
	// particles; zero means 1200 and 400 GeV.
	EmberMassGeV float64 `yaml:"ember_mass_gev"`
	ShadeMassGeV float64 `yaml:"shade_mass_gev"`
	// SqrtSGeV is the collision energy; zero means 14000 GeV (Meridian).
	SqrtSGeV float64 `yaml:"sqrt_s_gev"`
	// LibraryEvents is the number of pre-simulated minimum-bias
	// interactions overlaid; zero means 1000.
	LibraryEvents int `yaml:"library_events"`
}

// ErrBadPhysicsConfig is wrapped by every PhysicsConfig validation error.
var ErrBadPhysicsConfig = errors.New("invalid physics generator settings")

func (c PhysicsConfig) withDefaults() PhysicsConfig {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&c.Luminosity, 1e34)
	def(&c.SigmaInelMb, 79.5)
	def(&c.JetPtMinGeV, defaultJetPtMinGeV)
	def(&c.EmberMassGeV, defaultEmberMassGeV)
	def(&c.ShadeMassGeV, defaultShadeMassGeV)
	def(&c.SqrtSGeV, defaultSqrtSGeV)
	if c.LibraryEvents == 0 {
		c.LibraryEvents = 1000
	}
	return c
}

// Validate reports settings outside their meaningful range, naming the key.
func (c PhysicsConfig) Validate() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("detector: physics %s: %w", fmt.Sprintf(format, args...), ErrBadPhysicsConfig)
	}
	c = c.withDefaults()
	for _, v := range []struct {
		key      string
		x        float64
		min, max float64
	}{
		{"mu", c.Mu, 0, 1000}, {"luminosity_cm2s", c.Luminosity, 0, 1e37},
		{"sigma_inel_mb", c.SigmaInelMb, 0, 1000}, {"jet_pt_min_gev", c.JetPtMinGeV, 1, 5000},
		{"ember_mass_gev", c.EmberMassGeV, 0, 10000}, {"shade_mass_gev", c.ShadeMassGeV, 0, 10000},
		{"sqrt_s_gev", c.SqrtSGeV, 10, 1e6},
	} {
		if !(v.x >= v.min && v.x <= v.max) {
			return bad("%s = %v, want %v..%v", v.key, v.x, v.min, v.max)
		}
	}
	if c.LibraryEvents < 1 || c.LibraryEvents > 1<<20 {
		return bad("library_events = %d, want 1..%d", c.LibraryEvents, 1<<20)
	}
	if c.ShadeMassGeV >= c.EmberMassGeV {
		return bad("shade_mass_gev = %v must be below ember_mass_gev = %v", c.ShadeMassGeV, c.EmberMassGeV)
	}
	if 2*c.EmberMassGeV >= c.SqrtSGeV || 2*c.JetPtMinGeV >= c.SqrtSGeV {
		return bad("sqrt_s_gev = %v is too small for ember_mass_gev %v or jet_pt_min_gev %v", c.SqrtSGeV, c.EmberMassGeV, c.JetPtMinGeV)
	}
	if c.Force != "" {
		if _, err := ParseProcess(c.Force); err != nil {
			return bad("force = %q: known processes are %s", c.Force, strings.Join(ProcessNames(), ", "))
		}
	}
	for name, v := range c.CrossSectionsPb {
		p, err := ParseProcess(name)
		if err != nil || p == ProcessMinBias {
			return bad("cross_sections_pb has unknown process %q (known: %s)", name, strings.Join(ProcessNames()[1:], ", "))
		}
		if !(v >= 0) || math.IsInf(v, 0) {
			return bad("cross_sections_pb.%s = %v, want a finite value >= 0", name, v)
		}
	}
	return nil
}

// engine is what the physics and the HepMC generators share: the streams,
// the pile-up overlay, the detector response and the source clocks. It is
// not safe for concurrent use.
type engine struct {
	desc   *Description
	part   *Partition
	seed   uint64
	mu     float64
	pileUp bool
	lib    *minBiasLibrary
	resp   *response
	clocks *sourceClocks
	src    *fastRand
	rng    *rand.Rand // draws from src
	parts  []particle
}

func newEngine(d *Description, part *Partition, seed uint64, cfg PhysicsConfig) (*engine, error) {
	if part.Geometry() != d.Geometry {
		return nil, errors.New("detector: partition was made for another geometry than the description's")
	}
	mu := cfg.Mu
	if mu == 0 {
		mu = PileUpMu(cfg.Luminosity, cfg.SigmaInelMb, d.Filling.Colliding(), RevolutionHz)
	}
	if !(mu <= 1000) {
		return nil, fmt.Errorf("detector: physics pile-up mu = %v from luminosity_cm2s = %v, want <= 1000: %w", mu, cfg.Luminosity, ErrBadPhysicsConfig)
	}
	src := new(fastRand)
	src.seed(seed, math.MaxUint64) // begin reseeds per crossing
	e := &engine{
		desc: d, part: part, seed: seed, mu: mu, pileUp: !cfg.NoPileUp && mu > 0,
		resp:   newResponse(d.Geometry, part),
		clocks: newSourceClocks(d.Config.Readout, part.AllSources(), seed),
		src:    src, rng: rand.New(src),
	}
	if e.pileUp {
		e.lib = newMinBiasLibrary(d.Geometry, part, seed, cfg.LibraryEvents)
	}
	return e, nil
}

// begin resets c for crossing n, numbers it, stamps it and seeds the
// crossing's own random stream, so that no crossing depends on another.
func (e *engine) begin(n uint64, c *Crossing) {
	c.reset(e.part.CaloSources())
	c.resetMuons(e.part.MuonSources())
	c.N = n
	c.Orbit, c.Bcid = e.desc.Filling.Crossing(n)
	e.clocks.fill(c)
	e.src.seed(e.seed, n)
	e.parts = e.parts[:0]
	c.Truth.Weight = 1
}

// overlay adds the pile-up interactions.
func (e *engine) overlay(c *Crossing) {
	if !e.pileUp {
		return
	}
	k := poissonVariate(e.rng, e.mu)
	c.Interactions += k
	e.lib.overlay(e.rng, k, e.resp, c)
}

// finish passes the collected particles through the detector, adds noise
// and digitises.
func (e *engine) finish(c *Crossing) {
	for _, q := range e.parts {
		e.resp.simulate(e.rng, q, c)
	}
	e.resp.readout(e.src, e.rng, c)
}

// PhysicsGenerator makes crossings from a physics model: Poisson pile-up of
// minimum-bias interactions overlaid from a pre-simulated library, hard
// processes (multijets, W, Z, top pairs, the invented ember pairs) at rates
// from their cross-sections or one forced per crossing, and the Lantern
// detector response (showers, noise, zero suppression, muon-station hits,
// source clocks). Every crossing is a function of (seed, n) only. It is not
// safe for concurrent use; give each goroutine its own.
type PhysicsGenerator struct {
	*engine
	cfg    PhysicsConfig
	model  hardModel
	forced Process // ProcessMinBias with force unset: natural mix
	force  bool
	lambda [numProcesses]float64 // expected interactions per crossing
	expNeg [numProcesses]float64 // exp(-lambda)
	sigma  [numProcesses]float64 // pb, as used
}

// NewPhysicsGenerator returns a physics generator over d's geometry,
// filling scheme and readout, split by part (which must be made for
// d.Geometry). Building the pile-up library takes a moment (about a tenth
// of a second at the default size).
func NewPhysicsGenerator(d *Description, part *Partition, seed uint64, cfg PhysicsConfig) (*PhysicsGenerator, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	e, err := newEngine(d, part, seed, cfg)
	if err != nil {
		return nil, err
	}
	g := &PhysicsGenerator{
		engine: e, cfg: cfg,
		model: hardModel{sqrtS: cfg.SqrtSGeV, jetPtMin: cfg.JetPtMinGeV, emberMass: cfg.EmberMassGeV, shadeMass: cfg.ShadeMassGeV},
	}
	if cfg.Force != "" {
		g.forced, _ = ParseProcess(cfg.Force)
		g.force = true
	}
	sigmaInelPb := cfg.SigmaInelMb * 1e9
	for p := ProcessMultijet; p < ProcessHepMC; p++ {
		s := defaultCrossSectionPb[p]
		if v, ok := cfg.CrossSectionsPb[p.String()]; ok {
			s = v
		}
		if p == ProcessMultijet {
			s *= jetSpectrumIntegral(cfg.JetPtMinGeV, cfg.SqrtSGeV) / jetSpectrumIntegral(multijetRefPtGeV, cfg.SqrtSGeV)
		}
		g.sigma[p] = s
		if sigmaInelPb > 0 {
			g.lambda[p] = e.mu * s / sigmaInelPb
		}
		g.expNeg[p] = math.Exp(-g.lambda[p])
	}
	return g, nil
}

// Mu returns the mean pile-up in use.
func (g *PhysicsGenerator) Mu() float64 { return g.mu }

// CrossSectionPb returns the cross-section of p in use, in pb (multijet:
// above the configured pT_hat), or 0 for minbias.
func (g *PhysicsGenerator) CrossSectionPb(p Process) float64 {
	if p >= numProcesses {
		return 0
	}
	return g.sigma[p]
}

// ExpectedPerCrossing returns the mean number of interactions of process p
// per colliding crossing, mu * sigma_p / sigma_inel.
func (g *PhysicsGenerator) ExpectedPerCrossing(p Process) float64 {
	if p >= numProcesses {
		return 0
	}
	return g.lambda[p]
}

// Generate fills c with crossing n of the run.
func (g *PhysicsGenerator) Generate(n uint64, c *Crossing) {
	g.begin(n, c)
	g.overlay(c)
	r := g.rng
	natural := !g.force || g.forced != ProcessMinBias
	for p := ProcessMultijet; p < ProcessHepMC && natural; p++ {
		if g.force && p == g.forced {
			continue
		}
		// Poisson by multiplying uniforms: the means are far below 1.
		k, u := 0, r.Float64()
		for u > g.expNeg[p] {
			k++
			u *= r.Float64()
		}
		for range k {
			g.parts = g.model.generate(r, p, c, g.parts)
		}
	}
	if g.force && g.forced != ProcessMinBias {
		g.parts = g.model.generate(r, g.forced, c, g.parts)
		c.Truth.Process = g.forced
		c.Truth.Weight = g.lambda[g.forced]
	} else {
		c.Truth.Process = rarest(c.Truth.Hard)
	}
	c.Interactions += len(c.Truth.Hard)
	g.finish(c)
}

// rarest returns the process of the list that comes last in process order
// (the order of falling cross-section), or ProcessMinBias.
func rarest(ps []Process) Process {
	if len(ps) == 0 {
		return ProcessMinBias
	}
	return slices.Max(ps)
}
