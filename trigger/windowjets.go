package trigger

import (
	"cmp"
	"fmt"
	"slices"
)

// WindowConfig sets up the sliding-window jet finder. The zero value finds
// every window that is a local maximum, keeps all of them and calls its HT
// scalar "ht".
type WindowConfig struct {
	// Seed in GeV: the central cell of a jet window must have at least this
	// E_T. Zero: any cell with energy.
	Seed float64
	// MinET in GeV: jets with a smaller E_T are not kept. Zero keeps all.
	MinET float64
	// HTMin in GeV: HT sums the kept jets with E_T >= HTMin. Zero (or any
	// value up to MinET): HT sums every kept jet.
	HTMin float64
	// HTName names the HT scalar in expressions. Empty: "ht".
	HTName string
}

// WindowFinder is the fast sliding-window jet finder on the tower grid. It
// sums the two layers of each (ieta, iphi) cell and looks at 3x3 windows of
// cells, wrapping around in phi but not in eta (cells beyond the eta edges
// count as empty). A window is a jet when
//
//   - its central cell has E_T >= Seed (and > 0), and
//   - it beats the 8 windows centred on the neighbouring cells, ordered by
//     E_T sum, then by the E_T of the central cell, then by the lower cell
//     index ieta*PhiBins+iphi. That is a strict order, so of two windows
//     centred on neighbouring cells (the 8 around) at most one becomes a
//     jet, and an isolated tower, which all 9 windows around it see, makes
//     one jet centred on itself. Windows centred two cells apart overlap
//     and may both be jets: the cells they share (a row or column of
//     three straight across, two at a knight's offset, one corner on a
//     diagonal) count in both, and in HT twice.
//
// Jet E_T is the window sum; eta and phi are the E_T-weighted centroid of
// the cell centres (phi measured from the central cell, so the centroid is
// right across the -pi/pi seam). Jets with E_T >= MinET are kept, sorted by
// E_T descending (equal E_T: lower cell index first). The collection has the
// fields et, eta, phi; the scalar HT is the sum of the E_T of the kept jets
// with E_T >= HTMin.
//
// Only neighbours that could be jets themselves (central cell at least
// Seed and above zero) compete: a window centred on an empty or sub-seed
// cell between two deposits has the largest sum but can give no jet, and
// letting it veto its neighbours would lose both deposits. Two jets two
// cells apart then share the column or row between them, whose E_T counts
// in both.
//
// A WindowFinder is immutable and safe for concurrent use.
type WindowFinder struct {
	cfg    WindowConfig
	schema Schema
}

var (
	_ Algorithm     = (*WindowFinder)(nil)
	_ GridValidator = (*WindowFinder)(nil)
	_ CellReader    = (*WindowFinder)(nil)
)

var _ = standardAlgorithm("window", newWindowFinderFromParams)

var windowFields = []Field{{Name: "et", Kind: Energy}, {Name: "eta", Kind: Number}, {Name: "phi", Kind: Angle}}

// NewWindowFinder returns a finder with the given configuration. It
// returns an error for negative or non-finite energies.
func NewWindowFinder(cfg WindowConfig) (*WindowFinder, error) {
	for _, v := range []struct {
		name string
		x    float64
	}{{"seed", cfg.Seed}, {"min_et", cfg.MinET}, {"ht_min", cfg.HTMin}} {
		if !finite(v.x) || v.x < 0 {
			return nil, fmt.Errorf("trigger: window finder %s %v GeV, want a finite value >= 0", v.name, v.x)
		}
	}
	if cfg.HTName == "" {
		cfg.HTName = "ht"
	}
	return &WindowFinder{cfg: cfg, schema: Schema{
		Fields:  windowFields,
		Scalars: []Field{{Name: cfg.HTName, Kind: Energy}},
	}}, nil
}

// newWindowFinderFromParams is the Factory registered as "window". The HT
// scalar of a collection called jets is ht; of any other collection c it is
// c_ht, so that two jet collections do not clash.
func newWindowFinderFromParams(p *Params) (Algorithm, error) {
	seed := p.Energy("seed", 0)
	minET := p.Energy("min_et", 0)
	htMin := p.Energy("ht_min", minET)
	for _, k := range []struct {
		key string
		v   float64
	}{{"seed", seed}, {"min_et", minET}, {"ht_min", htMin}} {
		if k.v < 0 {
			p.Fail(k.key, fmt.Sprintf("%s %s", k.key, formatEnergy(k.v)), "an energy >= 0 GeV")
		}
	}
	if htMin < minET {
		p.Fail("ht_min", fmt.Sprintf("ht_min %s below min_et %s", formatEnergy(htMin), formatEnergy(minET)), "ht_min >= min_et (HT sums kept jets only)")
	}
	if err := p.Err(); err != nil {
		return nil, err
	}
	name := "ht"
	if p.Name() != "jets" {
		name = p.Name() + "_ht"
	}
	return NewWindowFinder(WindowConfig{Seed: seed, MinET: minET, HTMin: htMin, HTName: name})
}

// Config returns the configuration, with HTName filled in.
func (w *WindowFinder) Config() WindowConfig { return w.cfg }

// Schema returns the fields et, eta, phi and the HT scalar.
func (w *WindowFinder) Schema() Schema { return w.schema }

// ValidateGrid reports a grid the finder cannot work on.
func (w *WindowFinder) ValidateGrid(g Grid) error { return g.Validate() }

// CellNeeds asks for the cells that can be a jet's centre: E_T >= Seed.
func (w *WindowFinder) CellNeeds() CellNeeds { return CellNeeds{Hot: true, MinET: w.cfg.Seed} }

// windowJet is one jet of the sliding-window finder; cell is the index
// ieta*PhiBins+iphi of its central cell, the last tie-break of the sort.
type windowJet struct {
	et, eta, phi float64
	cell         int
}

type windowScratch struct{ jets []windowJet }

// Run finds the jets of one event.
func (w *WindowFinder) Run(in *Input, out *Output) {
	g := in.Grid
	cells := in.Cells
	if len(cells) == 0 || g.PhiBins < 3 || len(cells) != g.EtaBins*g.PhiBins {
		return
	}
	sc, _ := out.Scratch.(*windowScratch)
	if sc == nil {
		sc = &windowScratch{}
		out.Scratch = sc
	}
	jets := sc.jets[:0]
	nphi, neta := g.PhiBins, g.EtaBins
	seed := w.cfg.Seed
	phiStep := g.PhiStep()
	for _, c32 := range in.Hot {
		c := int(c32)
		centre := cells[c]
		if centre < seed || !(centre > 0) {
			continue
		}
		ieta, iphi := c/nphi, c%nphi
		// block[a][b] is cell (ieta+a-2, iphi+b-2): the 5x5 cells that the
		// window and its 8 neighbours cover.
		var block [5][5]float64
		for a := 0; a < 5; a++ {
			e := ieta + a - 2
			if e < 0 || e >= neta {
				continue
			}
			row := cells[e*nphi : (e+1)*nphi]
			for b := 0; b < 5; b++ {
				block[a][b] = row[(iphi+b-2+2*nphi)%nphi]
			}
		}
		sum := windowSum(&block, 2, 2)
		isMax := true
		for da := -1; da <= 1 && isMax; da++ {
			e := ieta + da
			if e < 0 || e >= neta {
				continue
			}
			for db := -1; db <= 1; db++ {
				if da == 0 && db == 0 {
					continue
				}
				// A window that cannot be a jet itself (its centre below
				// the seed, or empty) does not veto this one: the deposit
				// would otherwise give no jet at all.
				nc := block[2+da][2+db]
				if nc < seed || !(nc > 0) {
					continue
				}
				s := windowSum(&block, 2+da, 2+db)
				if s < sum {
					continue
				}
				if s > sum {
					isMax = false
					break
				}
				// Equal sums: the window with the hotter centre wins, then
				// the lower cell index.
				if nc > centre || (nc == centre && e*nphi+(iphi+db+nphi)%nphi < c) {
					isMax = false
					break
				}
			}
		}
		if !isMax {
			continue
		}
		var etaSum, phiSum float64
		for a := 1; a <= 3; a++ {
			e := ieta + a - 2
			if e < 0 || e >= neta {
				continue
			}
			eta := g.EtaCentre(e)
			for b := 1; b <= 3; b++ {
				et := block[a][b]
				etaSum += et * eta
				phiSum += et * float64(b-2) * phiStep
			}
		}
		jets = append(jets, windowJet{et: sum, eta: etaSum / sum, phi: wrapPhi(g.PhiCentre(iphi) + phiSum/sum), cell: c})
	}
	slices.SortFunc(jets, func(a, b windowJet) int {
		if c := cmp.Compare(b.et, a.et); c != 0 {
			return c
		}
		return cmp.Compare(a.cell, b.cell)
	})
	var ht float64
	for _, j := range jets {
		if j.et < w.cfg.MinET {
			break
		}
		out.Objects.Add(j.et, j.eta, j.phi)
		if j.et >= w.cfg.HTMin {
			ht += j.et
		}
	}
	out.Scalars[0] = ht
	sc.jets = jets
}

// windowSum adds the 3x3 cells of block centred on (a, b) in a fixed
// order, so that the same window sums to the same float64 whichever
// candidate computes it: ties must compare exactly equal.
func windowSum(block *[5][5]float64, a, b int) float64 {
	var s float64
	for i := a - 1; i <= a+1; i++ {
		for j := b - 1; j <= b+1; j++ {
			s += block[i][j]
		}
	}
	return s
}
