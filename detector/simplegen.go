package detector

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// SimpleConfig sets the toy crossing model of SimpleGenerator. Zero fields
// take the defaults given in their comments.
type SimpleConfig struct {
	// Mu is the mean number of inelastic interactions per crossing; zero
	// means 20.
	Mu float64 `yaml:"mu"`
	// ParticlesPerInteraction is the mean number of deposits one soft
	// interaction leaves; zero means 6.
	ParticlesPerInteraction float64 `yaml:"particles_per_interaction"`
	// SoftMeanGeV is the mean transverse energy of a soft deposit
	// (exponential spectrum); zero means 0.5 GeV.
	SoftMeanGeV float64 `yaml:"soft_mean_gev"`
	// DijetFraction is the share of crossings with a hard two-jet scatter;
	// zero means 0.01.
	DijetFraction float64 `yaml:"dijet_fraction"`
	// InvisibleFraction is the share of crossings with one jet recoiling
	// against something invisible, which leaves large missing transverse
	// energy; zero means 0.002.
	InvisibleFraction float64 `yaml:"invisible_fraction"`
	// JetMinGeV is the lower end of the hard-jet spectrum, falling as
	// pT^-4 above it; zero means 20 GeV.
	JetMinGeV float64 `yaml:"jet_min_gev"`
}

func (c SimpleConfig) withDefaults() SimpleConfig {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&c.Mu, 20)
	def(&c.ParticlesPerInteraction, 6)
	def(&c.SoftMeanGeV, 0.5)
	def(&c.DijetFraction, 0.01)
	def(&c.InvisibleFraction, 0.002)
	def(&c.JetMinGeV, 20)
	return c
}

// Validate reports settings outside their meaningful range.
func (c SimpleConfig) Validate() error {
	c = c.withDefaults()
	for _, v := range []struct {
		name string
		x    float64
		max  float64
	}{
		{"mu", c.Mu, 1000}, {"particles_per_interaction", c.ParticlesPerInteraction, 1000},
		{"soft_mean_gev", c.SoftMeanGeV, 100}, {"dijet_fraction", c.DijetFraction, 1},
		{"invisible_fraction", c.InvisibleFraction, 1}, {"jet_min_gev", c.JetMinGeV, 10000},
	} {
		if !(v.x >= 0 && v.x <= v.max) {
			return fmt.Errorf("detector: generator %s = %v, want 0..%v", v.name, v.x, v.max)
		}
	}
	return nil
}

// SimpleGenerator is a seeded toy model of calorimeter crossings: Poisson
// pile-up of soft deposits, occasional hard dijets and occasional jets
// recoiling against invisible particles. It is meant to exercise the chain,
// not to model physics; see the physics generator for that. It is not safe
// for concurrent use.
type SimpleGenerator struct {
	desc    *Description
	part    *Partition
	cfg     SimpleConfig
	seed    uint64
	et      []float64 // per-tower scratch, GeV
	touched []uint32
	rng     *rand.Rand
	src     *rand.PCG
}

// NewSimpleGenerator returns a generator over d's geometry and filling
// scheme, split by part.
func NewSimpleGenerator(d *Description, part *Partition, seed uint64, cfg SimpleConfig) (*SimpleGenerator, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	src := rand.NewPCG(0, 0)
	return &SimpleGenerator{
		desc: d, part: part, cfg: cfg.withDefaults(), seed: seed,
		et: make([]float64, d.Geometry.Towers()), src: src, rng: rand.New(src),
	}, nil
}

// Generate fills c with crossing n of the run.
func (g *SimpleGenerator) Generate(n uint64, c *Crossing) {
	geo := g.desc.Geometry
	c.reset(g.part.Sources())
	c.N = n
	c.Orbit, c.Bcid = g.desc.Filling.Crossing(n)
	c.TimestampNs = DefaultClock().Nominal(c.Orbit, c.Bcid)
	// One stream per crossing: the crossing does not depend on which
	// crossings were generated before it, so any process can make any one.
	g.src.Seed(g.seed, n*0x9e3779b97f4a7c15+1)
	r := g.rng

	c.Interactions = poisson(r, g.cfg.Mu)
	for i := 0; i < c.Interactions; i++ {
		np := poisson(r, g.cfg.ParticlesPerInteraction)
		for k := 0; k < np; k++ {
			et := r.ExpFloat64() * g.cfg.SoftMeanGeV
			eta := (2*r.Float64() - 1) * 5 // some particles fall outside |eta| < 4
			phi := (2*r.Float64() - 1) * math.Pi
			layer := LayerHad
			if r.Float64() < 0.4 {
				layer = LayerEM
			}
			g.deposit(c, layer, eta, phi, et)
		}
	}
	u := r.Float64()
	switch {
	case u < g.cfg.DijetFraction:
		pt := g.cfg.JetMinGeV * math.Pow(1-r.Float64(), -1.0/3)
		phi := (2*r.Float64() - 1) * math.Pi
		g.jet(c, (2*r.Float64()-1)*2.5, phi, pt)
		g.jet(c, (2*r.Float64()-1)*2.5, phi+math.Pi+0.2*r.NormFloat64(), pt*(0.8+0.2*r.Float64()))
	case u < g.cfg.DijetFraction+g.cfg.InvisibleFraction:
		pt := 2.5 * g.cfg.JetMinGeV * math.Pow(1-r.Float64(), -1.0/2)
		phi := (2*r.Float64() - 1) * math.Pi
		g.jet(c, (2*r.Float64()-1)*2.5, phi, pt)
		// The recoil escapes unseen, opposite the jet: the true missing
		// momentum points along it.
		c.TrueMETx -= pt * math.Cos(phi)
		c.TrueMETy -= pt * math.Sin(phi)
	}
	g.digitise(c, geo)
}

// jet spreads a jet of transverse energy pt over a 3x3 patch: 60% in the
// centre, the rest shared by the neighbours; 30% electromagnetic.
func (g *SimpleGenerator) jet(c *Crossing, eta, phi, pt float64) {
	step := g.desc.Geometry.EtaStep
	dphi := 2 * math.Pi / float64(g.desc.Geometry.PhiBins)
	for de := -1; de <= 1; de++ {
		for dp := -1; dp <= 1; dp++ {
			share := 0.05
			if de == 0 && dp == 0 {
				share = 0.6
			}
			e, p := eta+float64(de)*step, phi+float64(dp)*dphi
			g.deposit(c, LayerEM, e, p, 0.3*share*pt)
			g.deposit(c, LayerHad, e, p, 0.7*share*pt)
		}
	}
}

func (g *SimpleGenerator) deposit(c *Crossing, layer int, eta, phi, et float64) {
	geo := g.desc.Geometry
	ieta, iphi, ok := geo.Locate(eta, phi)
	if !ok {
		// Outside the calorimeter: it escapes, so it counts in the true
		// missing momentum (the vector sum of what escapes).
		c.TrueMETx += et * math.Cos(phi)
		c.TrueMETy += et * math.Sin(phi)
		return
	}
	t := geo.TowerIndex(layer, ieta, iphi)
	if g.et[t] == 0 {
		g.touched = append(g.touched, uint32(t))
	}
	g.et[t] += et
}

func (g *SimpleGenerator) digitise(c *Crossing, geo *Geometry) {
	slices.Sort(g.touched)
	for _, t := range g.touched {
		n, sat := geo.Counts(g.et[t])
		g.et[t] = 0
		if n == 0 {
			continue
		}
		s := g.part.Owner(int(t)) - 1
		c.PerSource[s] = append(c.PerSource[s], TowerCount{Tower: t, Counts: n})
		if sat {
			c.Saturated[s] = true
		}
	}
	g.touched = g.touched[:0]
}

// poisson draws a Poisson variate of mean mu: by multiplication of uniforms
// for small means, by a rounded normal approximation above 30 (adequate for
// a toy model).
func poisson(r *rand.Rand, mu float64) int {
	if mu <= 0 {
		return 0
	}
	if mu > 30 {
		k := int(math.Round(mu + math.Sqrt(mu)*r.NormFloat64()))
		if k < 0 {
			return 0
		}
		return k
	}
	l := math.Exp(-mu)
	k, p := 0, r.Float64()
	for p > l {
		k++
		p *= r.Float64()
	}
	return k
}
