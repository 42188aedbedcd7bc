package trigger

import (
	"cmp"
	"fmt"
	"slices"
)

// This file is the whole of the narrow-cluster finder: its configuration,
// its factory, its registration and its Run. It is the worked example of
// docs/menu.md, "Adding a finder": a new algorithm is one file like this
// plus its test.

// NarrowConfig sets up the narrow-cluster finder. The zero value makes a
// cluster at every local maximum of the summed cells, keeps all of them and
// measures the spread in the 5x5 cells around the seed.
type NarrowConfig struct {
	// Seed in GeV: the central cell (both layers) must have at least this
	// E_T. Zero: any cell with energy.
	Seed float64
	// MinET in GeV: clusters with a smaller core E_T are not kept. Zero
	// keeps all.
	MinET float64
	// Ring is the half-width in cells of the square around the seed that
	// the spread is measured in: 1 to 3. Zero means 2 (5x5 cells).
	Ring int
}

// NarrowFinder finds narrow hadronic clusters (finder: narrow-cluster),
// the shape a hadronically decaying tau lepton leaves: most of its energy
// in a 2x2 core of cells, little around it. A seed is a cell whose summed
// E_T (both layers) is at least Seed and a local maximum of its 3x3
// neighbourhood, in the window finder's strict order. Around a seed the
// core is the 2x2 square of summed cells holding the seed with the largest
// E_T; the fields are
//
//   - et: the core E_T; eta, phi: its E_T-weighted centroid;
//   - iso: the E_T of the (2 Ring + 1)^2 cells centred on the seed outside
//     the core, over et (a narrow cluster has a small iso);
//   - em_frac: the electromagnetic share of the core's E_T.
//
// Clusters with et >= MinET are kept, sorted by et descending (equal et:
// lower seed cell first).
//
// A NarrowFinder is immutable and safe for concurrent use.
type NarrowFinder struct {
	cfg NarrowConfig
}

var (
	_ Algorithm     = (*NarrowFinder)(nil)
	_ GridValidator = (*NarrowFinder)(nil)
	_ CellReader    = (*NarrowFinder)(nil)
)

var _ = standardAlgorithm("narrow-cluster", newNarrowFinderFromParams)

var narrowSchema = Schema{Fields: []Field{
	{Name: "et", Kind: Energy}, {Name: "eta", Kind: Number}, {Name: "phi", Kind: Angle},
	{Name: "iso", Kind: Number}, {Name: "em_frac", Kind: Number},
}}

// NewNarrowFinder returns a finder with the given configuration. It
// returns an error for a negative or non-finite energy or a ring outside
// 1..3.
func NewNarrowFinder(cfg NarrowConfig) (*NarrowFinder, error) {
	if cfg.Ring == 0 {
		cfg.Ring = 2
	}
	if cfg.Ring < 1 || cfg.Ring > 3 {
		return nil, fmt.Errorf("trigger: narrow-cluster ring %d, want 1 to 3 cells", cfg.Ring)
	}
	if !finite(cfg.Seed) || cfg.Seed < 0 || !finite(cfg.MinET) || cfg.MinET < 0 {
		return nil, fmt.Errorf("trigger: narrow-cluster seed %v GeV and min_et %v GeV, want finite values >= 0", cfg.Seed, cfg.MinET)
	}
	return &NarrowFinder{cfg: cfg}, nil
}

func newNarrowFinderFromParams(p *Params) (Algorithm, error) {
	seed := p.Energy("seed", 0)
	minET := p.Energy("min_et", 0)
	ring := p.Int("ring", 2)
	if seed < 0 {
		p.Fail("seed", "seed "+formatEnergy(seed), "an energy >= 0 GeV")
	}
	if minET < 0 {
		p.Fail("min_et", "min_et "+formatEnergy(minET), "an energy >= 0 GeV")
	}
	if ring < 1 || ring > 3 {
		p.Fail("ring", fmt.Sprintf("ring %d", ring), "1, 2 or 3 cells")
	}
	if err := p.Err(); err != nil {
		return nil, err
	}
	return NewNarrowFinder(NarrowConfig{Seed: seed, MinET: minET, Ring: ring})
}

// Config returns the configuration, with the defaults filled in.
func (f *NarrowFinder) Config() NarrowConfig { return f.cfg }

// Schema returns the fields et, eta, phi, iso, em_frac.
func (f *NarrowFinder) Schema() Schema { return narrowSchema }

// ValidateGrid reports a grid the finder cannot work on.
func (f *NarrowFinder) ValidateGrid(g Grid) error {
	if err := g.Validate(); err != nil {
		return err
	}
	if g.PhiBins < 2*f.cfg.Ring+1 {
		return fmt.Errorf("trigger: narrow-cluster ring of %d cells needs at least %d phi bins, the grid has %d", f.cfg.Ring, 2*f.cfg.Ring+1, g.PhiBins)
	}
	return nil
}

// CellNeeds asks for the possible seeds and the per-layer cells.
func (f *NarrowFinder) CellNeeds() CellNeeds {
	return CellNeeds{Hot: true, MinET: f.cfg.Seed, Layers: true}
}

type narrowCluster struct {
	et, eta, phi, iso, em float64
	cell                  int
}

type narrowScratch struct{ cl []narrowCluster }

// Run finds the clusters of one event.
func (f *NarrowFinder) Run(in *Input, out *Output) {
	g := in.Grid
	cells, em := in.Cells, in.EMCells
	if len(cells) == 0 || len(cells) != g.EtaBins*g.PhiBins || len(em) != len(cells) || g.PhiBins < 2*f.cfg.Ring+1 {
		return
	}
	sc, _ := out.Scratch.(*narrowScratch)
	if sc == nil {
		sc = &narrowScratch{}
		out.Scratch = sc
	}
	cl := sc.cl[:0]
	nphi, neta := g.PhiBins, g.EtaBins
	seed, ring := f.cfg.Seed, f.cfg.Ring
	src := in.Hot
	if !(in.HotCut <= seed) {
		src = in.Touched
	}
	// cell returns the index of (e, p) with p wrapped, or -1 past the eta
	// edges.
	cell := func(e, p int) int {
		if e < 0 || e >= neta {
			return -1
		}
		return e*nphi + (p+nphi)%nphi
	}
	val := func(v []float64, k int) float64 {
		if k < 0 {
			return 0
		}
		return v[k]
	}
	phiStep := g.PhiStep()
	for _, c32 := range src {
		c := int(c32)
		centre := cells[c]
		if centre < seed || !(centre > 0) {
			continue
		}
		ie, ip := c/nphi, c%nphi
		if !localMax(cells, neta, nphi, ie, ip, centre, c) {
			continue
		}
		best, bde, bdp := -1.0, 0, 0
		for _, d := range [4][2]int{{-1, -1}, {-1, 0}, {0, -1}, {0, 0}} {
			s := 0.0
			for a := 0; a < 2; a++ {
				for b := 0; b < 2; b++ {
					s += val(cells, cell(ie+d[0]+a, ip+d[1]+b))
				}
			}
			if s > best {
				best, bde, bdp = s, d[0], d[1]
			}
		}
		var etaSum, phiSum, emSum, around float64
		for a := -ring; a <= ring; a++ {
			for b := -ring; b <= ring; b++ {
				k := cell(ie+a, ip+b)
				e := val(cells, k)
				if e == 0 {
					continue
				}
				if a < bde || a > bde+1 || b < bdp || b > bdp+1 {
					around += e
					continue
				}
				etaSum += e * g.EtaCentre(ie+a)
				phiSum += e * float64(b) * phiStep
				emSum += em[k]
			}
		}
		cl = append(cl, narrowCluster{
			et: best, eta: etaSum / best, phi: wrapPhi(g.PhiCentre(ip) + phiSum/best),
			iso: around / best, em: min(emSum/best, 1), cell: c,
		})
	}
	slices.SortFunc(cl, func(x, y narrowCluster) int {
		if c := cmp.Compare(y.et, x.et); c != 0 {
			return c
		}
		return cmp.Compare(x.cell, y.cell)
	})
	for _, k := range cl {
		if k.et < f.cfg.MinET {
			break
		}
		out.Objects.Add(k.et, k.eta, k.phi, k.iso, k.em)
	}
	sc.cl = cl
}
