package trigger

import (
	"cmp"
	"fmt"
	"math"
	"slices"
)

// AntiKtConfig sets up the anti-kt jet finder. The zero value clusters
// every cell with energy with R = 0.4, keeps every jet and calls its HT
// scalar "ht".
type AntiKtConfig struct {
	// Radius is the jet radius R, 0 < R <= 1.5. Zero means 0.4.
	Radius float64
	// MinET in GeV: jets with a smaller E_T are not kept. Zero keeps all.
	MinET float64
	// InputMinET in GeV: inputs (cells or towers) with a smaller E_T are
	// not clustered. Zero clusters all.
	InputMinET float64
	// Towers clusters the selected towers one by one, both layers apart
	// and towers off the grid too; false clusters the grid cells, the two
	// layers of each (ieta, iphi) added.
	Towers bool
	// HTMin in GeV: HT sums the kept jets with E_T >= HTMin. Zero (or any
	// value up to MinET): every kept jet.
	HTMin float64
	// HTName names the HT scalar in expressions. Empty: "ht".
	HTName string
}

// AntiKtFinder is the anti-kt jet finder of the menus (finder: antikt): it
// takes the cells of the tower grid (or the towers) as massless
// four-vectors, px = E_T cos phi, py = E_T sin phi, pz = E_T sinh eta,
// E = E_T cosh eta, at their centres, and clusters them with AntiKt. The
// collection's fields are, per jet:
//
//   - et: the transverse energy E sin(theta) of the jet four-vector;
//   - pt: its transverse momentum (at most et; equal for one input);
//   - eta: its pseudorapidity; y: its rapidity;
//   - phi: its azimuth, in (-pi, pi] as every collection's phi;
//   - m: its mass (E-scheme jets made of several inputs have mass);
//   - n: the number of inputs clustered into it.
//
// Jets with et >= MinET are kept, sorted by et descending. The scalar HT is
// the sum of the et of the kept jets with et >= HTMin.
//
// An AntiKtFinder is immutable and safe for concurrent use: its clustering
// storage lives in each Output's Scratch.
type AntiKtFinder struct {
	cfg    AntiKtConfig
	schema Schema
}

var (
	_ Algorithm     = (*AntiKtFinder)(nil)
	_ GridValidator = (*AntiKtFinder)(nil)
	_ CellReader    = (*AntiKtFinder)(nil)
)

var _ = standardAlgorithm("antikt", newAntiKtFinderFromParams)

var antiKtFields = []Field{
	{Name: "et", Kind: Energy}, {Name: "pt", Kind: Energy}, {Name: "eta", Kind: Number},
	{Name: "y", Kind: Number}, {Name: "phi", Kind: Angle}, {Name: "m", Kind: Energy}, {Name: "n", Kind: Number},
}

// maxJetRadius bounds R in menus: wider jets are no trigger objects.
const maxJetRadius = 1.5

// NewAntiKtFinder returns a finder with the given configuration. It
// returns an error for a radius outside (0, 1.5] or a negative or
// non-finite energy.
func NewAntiKtFinder(cfg AntiKtConfig) (*AntiKtFinder, error) {
	if cfg.Radius == 0 {
		cfg.Radius = 0.4
	}
	if !(cfg.Radius > 0 && cfg.Radius <= maxJetRadius) {
		return nil, fmt.Errorf("trigger: anti-kt radius %v, want 0 < R <= %v", cfg.Radius, maxJetRadius)
	}
	for _, v := range []struct {
		name string
		x    float64
	}{{"min_et", cfg.MinET}, {"input_min_et", cfg.InputMinET}, {"ht_min", cfg.HTMin}} {
		if !finite(v.x) || v.x < 0 {
			return nil, fmt.Errorf("trigger: anti-kt finder %s %v GeV, want a finite value >= 0", v.name, v.x)
		}
	}
	if cfg.HTName == "" {
		cfg.HTName = "ht"
	}
	return &AntiKtFinder{cfg: cfg, schema: Schema{
		Fields:  antiKtFields,
		Scalars: []Field{{Name: cfg.HTName, Kind: Energy}},
	}}, nil
}

// newAntiKtFinderFromParams is the Factory registered as "antikt". The HT
// scalar is named as the window finder's: ht for a collection called jets,
// NAME_ht otherwise.
func newAntiKtFinderFromParams(p *Params) (Algorithm, error) {
	r := p.Number("radius", 0.4)
	minET := p.Energy("min_et", 0)
	inputMin := p.Energy("input_min_et", 0)
	htMin := p.Energy("ht_min", minET)
	inputs := p.String("inputs", "cells")
	if !(r > 0 && r <= maxJetRadius) {
		p.Fail("radius", "radius "+formatNumber(r), fmt.Sprintf("a jet radius R with 0 < R <= %v", maxJetRadius))
	}
	for _, k := range []struct {
		key string
		v   float64
	}{{"min_et", minET}, {"input_min_et", inputMin}, {"ht_min", htMin}} {
		if k.v < 0 {
			p.Fail(k.key, fmt.Sprintf("%s %s", k.key, formatEnergy(k.v)), "an energy >= 0 GeV")
		}
	}
	if htMin < minET {
		p.Fail("ht_min", fmt.Sprintf("ht_min %s below min_et %s", formatEnergy(htMin), formatEnergy(minET)), "ht_min >= min_et (HT sums kept jets only)")
	}
	if inputs != "cells" && inputs != "towers" {
		p.Fail("inputs", fmt.Sprintf("inputs %q", inputs), "cells or towers")
	}
	if err := p.Err(); err != nil {
		return nil, err
	}
	name := "ht"
	if p.Name() != "jets" {
		name = p.Name() + "_ht"
	}
	return NewAntiKtFinder(AntiKtConfig{Radius: r, MinET: minET, InputMinET: inputMin, Towers: inputs == "towers", HTMin: htMin, HTName: name})
}

// Config returns the configuration, with the defaults filled in.
func (f *AntiKtFinder) Config() AntiKtConfig { return f.cfg }

// Schema returns the fields et, pt, eta, y, phi, m, n and the HT scalar.
func (f *AntiKtFinder) Schema() Schema { return f.schema }

// ValidateGrid reports a grid the finder cannot work on; on towers it
// needs none.
func (f *AntiKtFinder) ValidateGrid(g Grid) error {
	if f.cfg.Towers {
		return nil
	}
	return g.Validate()
}

// CellNeeds asks for the cells it clusters: E_T >= InputMinET.
func (f *AntiKtFinder) CellNeeds() CellNeeds {
	return CellNeeds{Hot: !f.cfg.Towers, MinET: f.cfg.InputMinET}
}

// antiKtScratch is the per-Output storage of the finder.
type antiKtScratch struct {
	ak   *AntiKt
	jets []AntiKtJet
	// The direction of every cell centre, for the grid grid.
	grid                  Grid
	sinhEta, coshEta, eta []float64
	cosPhi, sinPhi, phi   []float64 // phi in [0, 2pi)
}

func (sc *antiKtScratch) tables(g Grid) {
	if sc.grid == g && len(sc.eta) == g.EtaBins {
		return
	}
	sc.grid = g
	sc.eta, sc.sinhEta, sc.coshEta = make([]float64, g.EtaBins), make([]float64, g.EtaBins), make([]float64, g.EtaBins)
	for i := range sc.eta {
		e := g.EtaCentre(i)
		sc.eta[i], sc.sinhEta[i], sc.coshEta[i] = e, math.Sinh(e), math.Cosh(e)
	}
	sc.phi, sc.cosPhi, sc.sinPhi = make([]float64, g.PhiBins), make([]float64, g.PhiBins), make([]float64, g.PhiBins)
	for i := range sc.phi {
		ph := g.PhiCentre(i)
		sc.sinPhi[i], sc.cosPhi[i] = math.Sincos(ph)
		if ph < 0 {
			ph += 2 * math.Pi
		}
		sc.phi[i] = ph
	}
}

// Run finds the jets of one event.
func (f *AntiKtFinder) Run(in *Input, out *Output) {
	sc, _ := out.Scratch.(*antiKtScratch)
	if sc == nil {
		ak, _ := NewAntiKt(f.cfg.Radius) // the radius is checked already
		sc = &antiKtScratch{ak: ak}
		out.Scratch = sc
	}
	ak := sc.ak
	cut := f.cfg.InputMinET
	if f.cfg.Towers {
		ak.begin(len(in.Selected))
		for _, i := range in.Selected {
			t := in.Event.TowerAt(int(i), in.Grid)
			if !(t.ET > 0) || t.ET < cut {
				continue
			}
			phi := t.Phi
			if phi < 0 || phi >= 2*math.Pi {
				phi = math.Mod(phi, 2*math.Pi)
				if phi < 0 {
					phi += 2 * math.Pi
				}
			}
			if p := PtEtaPhi(t.ET, t.Eta, t.Phi); p.usable() {
				ak.add(i, p, t.Eta, phi)
			}
		}
	} else {
		g := in.Grid
		if len(in.Cells) == 0 || len(in.Cells) != g.EtaBins*g.PhiBins {
			return
		}
		sc.tables(g)
		src := in.Hot
		if !(in.HotCut <= cut) {
			src = in.Touched // Hot does not hold every input
		}
		ak.begin(len(src))
		nphi := g.PhiBins
		for _, c := range src {
			et := in.Cells[c]
			if !(et > 0) || et < cut {
				continue
			}
			ie, ip := int(c)/nphi, int(c)%nphi
			p := FourMomentum{Px: et * sc.cosPhi[ip], Py: et * sc.sinPhi[ip], Pz: et * sc.sinhEta[ie], E: et * sc.coshEta[ie]}
			if p.usable() {
				// A massless input's rapidity is its pseudorapidity.
				ak.add(c, p, sc.eta[ie], sc.phi[ip])
			}
		}
	}
	jets := ak.run(0, f.cfg.MinET, sc.jets[:0])
	slices.SortStableFunc(jets, func(a, b AntiKtJet) int { return cmp.Compare(b.ET(), a.ET()) })
	var ht float64
	for _, j := range jets {
		et := j.ET()
		m2 := j.M2()
		out.Objects.Add(et, j.Pt(), j.Eta(), j.Rapidity(), wrapPhi(j.Phi()), math.Sqrt(max(m2, 0)), float64(j.Constituents))
		if et >= f.cfg.HTMin {
			ht += et
		}
	}
	out.Scalars[0] = ht
	sc.jets = jets
}
