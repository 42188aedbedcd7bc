package trigger

import (
	"cmp"
	"fmt"
	"slices"
)

// EMClusterConfig sets up the electromagnetic cluster finder. The zero
// value makes a cluster at every local maximum of the electromagnetic layer,
// keeps all of them and measures isolation in the 5x5 cells around the
// seed.
type EMClusterConfig struct {
	// Seed in GeV: the central cell must have at least this electromagnetic
	// E_T. Zero: any cell with electromagnetic energy.
	Seed float64
	// MinET in GeV: clusters with a smaller E_T are not kept. Zero keeps
	// all.
	MinET float64
	// Ring is the half-width, in cells, of the square around the seed in
	// which isolation is measured: 1 to 3. Zero means 2 (5x5 cells).
	Ring int
}

// EMClusterFinder finds electromagnetic clusters (electron and photon
// candidates) on the electromagnetic layer of the tower grid
// (finder: em-cluster). A seed is a cell whose electromagnetic E_T is at
// least Seed and beats its 8 neighbours in the same strict order as the
// window finder (E_T, then the lower cell index), wrapping in phi, not in
// eta. Around a seed:
//
//   - the cluster is the 2x2 cells, of the four squares that contain the
//     seed, with the largest electromagnetic E_T (on ties the first of:
//     towards lower eta and lower phi, lower eta and higher phi, higher eta
//     and lower phi, higher eta and higher phi); its et is their sum, eta
//     and phi the E_T-weighted centroid of their centres;
//   - iso = (ring + had) / et, where ring is the electromagnetic E_T of
//     the (2 Ring + 1)^2 cells centred on the seed outside the cluster and
//     had the hadronic E_T of the 3x3 cells centred on the seed, behind the
//     cluster. An isolated electron or photon has iso near 0; one inside a
//     jet has iso of order 1 and more.
//
// The collection has the fields et, eta, phi, iso; clusters with
// et >= MinET are kept, sorted by et descending (equal et: lower seed cell
// first). Two clusters from neighbouring seeds may share cells.
//
// An EMClusterFinder is immutable and safe for concurrent use.
type EMClusterFinder struct {
	cfg EMClusterConfig
}

var (
	_ Algorithm     = (*EMClusterFinder)(nil)
	_ GridValidator = (*EMClusterFinder)(nil)
	_ CellReader    = (*EMClusterFinder)(nil)
)

var _ = standardAlgorithm("em-cluster", newEMClusterFinderFromParams)

var emClusterSchema = Schema{Fields: []Field{{Name: "et", Kind: Energy}, {Name: "eta", Kind: Number}, {Name: "phi", Kind: Angle}, {Name: "iso", Kind: Number}}}

// NewEMClusterFinder returns a finder with the given configuration. It
// returns an error for a negative or non-finite energy or a ring outside
// 1..3.
func NewEMClusterFinder(cfg EMClusterConfig) (*EMClusterFinder, error) {
	if cfg.Ring == 0 {
		cfg.Ring = 2
	}
	if cfg.Ring < 1 || cfg.Ring > 3 {
		return nil, fmt.Errorf("trigger: em-cluster ring %d, want 1 to 3 cells", cfg.Ring)
	}
	for _, v := range []struct {
		name string
		x    float64
	}{{"seed", cfg.Seed}, {"min_et", cfg.MinET}} {
		if !finite(v.x) || v.x < 0 {
			return nil, fmt.Errorf("trigger: em-cluster %s %v GeV, want a finite value >= 0", v.name, v.x)
		}
	}
	return &EMClusterFinder{cfg: cfg}, nil
}

func newEMClusterFinderFromParams(p *Params) (Algorithm, error) {
	seed := p.Energy("seed", 0)
	minET := p.Energy("min_et", 0)
	ring := p.Int("ring", 2)
	for _, k := range []struct {
		key string
		v   float64
	}{{"seed", seed}, {"min_et", minET}} {
		if k.v < 0 {
			p.Fail(k.key, fmt.Sprintf("%s %s", k.key, formatEnergy(k.v)), "an energy >= 0 GeV")
		}
	}
	if ring < 1 || ring > 3 {
		p.Fail("ring", fmt.Sprintf("ring %d", ring), "1, 2 or 3 cells")
	}
	if err := p.Err(); err != nil {
		return nil, err
	}
	return NewEMClusterFinder(EMClusterConfig{Seed: seed, MinET: minET, Ring: ring})
}

// Config returns the configuration, with the defaults filled in.
func (f *EMClusterFinder) Config() EMClusterConfig { return f.cfg }

// Schema returns the fields et, eta, phi, iso.
func (f *EMClusterFinder) Schema() Schema { return emClusterSchema }

// ValidateGrid reports a grid the finder cannot work on: the isolation
// square must not wrap around in phi onto itself.
func (f *EMClusterFinder) ValidateGrid(g Grid) error {
	if err := g.Validate(); err != nil {
		return err
	}
	if g.PhiBins < 2*f.cfg.Ring+1 {
		return fmt.Errorf("trigger: em-cluster ring of %d cells needs at least %d phi bins, the grid has %d", f.cfg.Ring, 2*f.cfg.Ring+1, g.PhiBins)
	}
	return nil
}

// CellNeeds asks for the per-layer cells and the possible seeds: a cell
// with electromagnetic E_T >= Seed has at least that much in both layers.
func (f *EMClusterFinder) CellNeeds() CellNeeds {
	return CellNeeds{Hot: true, MinET: f.cfg.Seed, Layers: true}
}

// emCluster is one cluster, with its seed cell for the last tie-break of
// the sort.
type emCluster struct {
	et, eta, phi, iso float64
	cell              int
}

type emScratch struct{ cl []emCluster }

// Run finds the clusters of one event.
func (f *EMClusterFinder) Run(in *Input, out *Output) {
	g := in.Grid
	em := in.EMCells
	if len(em) == 0 || len(em) != g.EtaBins*g.PhiBins || len(in.Cells) != len(em) || g.PhiBins < 2*f.cfg.Ring+1 {
		return
	}
	sc, _ := out.Scratch.(*emScratch)
	if sc == nil {
		sc = &emScratch{}
		out.Scratch = sc
	}
	cl := sc.cl[:0]
	nphi, neta := g.PhiBins, g.EtaBins
	seed, ring := f.cfg.Seed, f.cfg.Ring
	src := in.Hot
	if !(in.HotCut <= seed) {
		src = in.Touched
	}
	at := func(cells []float64, e, p int) float64 {
		if e < 0 || e >= neta {
			return 0
		}
		return cells[e*nphi+(p+nphi)%nphi]
	}
	phiStep := g.PhiStep()
	for _, c32 := range src {
		c := int(c32)
		centre := em[c]
		if centre < seed || !(centre > 0) {
			continue
		}
		ie, ip := c/nphi, c%nphi
		if !localMax(em, neta, nphi, ie, ip, centre, c) {
			continue
		}
		// The four 2x2 squares holding the seed, by their lower-left cell.
		best, bde, bdp := -1.0, 0, 0
		for _, d := range [4][2]int{{-1, -1}, {-1, 0}, {0, -1}, {0, 0}} {
			s := at(em, ie+d[0], ip+d[1]) + at(em, ie+d[0], ip+d[1]+1) + at(em, ie+d[0]+1, ip+d[1]) + at(em, ie+d[0]+1, ip+d[1]+1)
			if s > best {
				best, bde, bdp = s, d[0], d[1]
			}
		}
		var etaSum, phiSum float64
		for a := 0; a < 2; a++ {
			for b := 0; b < 2; b++ {
				e := at(em, ie+bde+a, ip+bdp+b)
				if e == 0 {
					continue
				}
				etaSum += e * g.EtaCentre(ie+bde+a)
				phiSum += e * float64(bdp+b) * phiStep
			}
		}
		var ringET, hadET float64
		for a := -ring; a <= ring; a++ {
			for b := -ring; b <= ring; b++ {
				if in2x2(a, b, bde, bdp) {
					continue
				}
				ringET += at(em, ie+a, ip+b)
			}
		}
		for a := -1; a <= 1; a++ {
			if e := ie + a; e >= 0 && e < neta {
				for b := -1; b <= 1; b++ {
					hadET += in.Had(e*nphi + (ip+b+nphi)%nphi)
				}
			}
		}
		cl = append(cl, emCluster{et: best, eta: etaSum / best, phi: wrapPhi(g.PhiCentre(ip) + phiSum/best), iso: (ringET + hadET) / best, cell: c})
	}
	slices.SortFunc(cl, func(x, y emCluster) int {
		if c := cmp.Compare(y.et, x.et); c != 0 {
			return c
		}
		return cmp.Compare(x.cell, y.cell)
	})
	for _, k := range cl {
		if k.et < f.cfg.MinET {
			break
		}
		out.Objects.Add(k.et, k.eta, k.phi, k.iso)
	}
	sc.cl = cl
}

// in2x2 reports whether offset (a, b) from the seed lies in the 2x2
// square whose lower-left cell is at offset (de, dp).
func in2x2(a, b, de, dp int) bool {
	return a >= de && a <= de+1 && b >= dp && b <= dp+1
}
