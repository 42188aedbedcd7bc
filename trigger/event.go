package trigger

import (
	"fmt"
	"math"
)

// Grid describes the detector as the features see it: the calorimeter
// tower grid and the solenoid field. Cell ieta lies in [0, EtaBins) with
// centre EtaMin+(ieta+0.5)*EtaStep; cell iphi lies in [0, PhiBins) with
// centre -pi+(iphi+0.5)*2pi/PhiBins. Each cell has two layers: 0
// electromagnetic, 1 hadronic.
//
// The zero Grid has no cells: towers are then off the grid and only the
// features that use tower eta and phi directly (MET, sum ET, anti-kt jets on
// towers) see them. Its field is DefaultFieldT.
type Grid struct {
	EtaBins, PhiBins int
	EtaMin, EtaStep  float64
	// FieldT is the solenoid field along +z in tesla, used by the muon
	// finders to turn curvature into transverse momentum. Zero means
	// DefaultFieldT; a negative value is a field along -z.
	FieldT float64
}

// DefaultFieldT is the field a Grid with FieldT zero stands for: the 3.0 T
// solenoid of the demo detector (docs/menu.md, "Muons").
const DefaultFieldT = 3.0

// Field returns the solenoid field in tesla: FieldT, or DefaultFieldT when
// FieldT is zero.
func (g Grid) Field() float64 {
	if g.FieldT == 0 {
		return DefaultFieldT
	}
	return g.FieldT
}

// Validate reports a grid that cannot hold towers. Grid-based algorithms
// need at least three phi bins, so that the 3x3 window wraps around without
// meeting itself.
func (g Grid) Validate() error {
	if g.EtaBins <= 0 || g.PhiBins < 3 {
		return fmt.Errorf("trigger: grid has %d eta bins and %d phi bins, want > 0 and >= 3", g.EtaBins, g.PhiBins)
	}
	if g.EtaBins > 1<<12 || g.PhiBins > 1<<12 {
		return fmt.Errorf("trigger: grid of %d x %d cells is too large, want at most 4096 bins per axis", g.EtaBins, g.PhiBins)
	}
	if !(g.EtaStep > 0) || math.IsInf(g.EtaStep, 0) || math.IsNaN(g.EtaMin) || math.IsInf(g.EtaMin, 0) {
		return fmt.Errorf("trigger: grid eta start %v and step %v, want finite values and step > 0", g.EtaMin, g.EtaStep)
	}
	return nil
}

// Cells returns the number of (ieta, iphi) cells, EtaBins*PhiBins, or 0
// for a grid with no cells.
func (g Grid) Cells() int {
	if g.EtaBins <= 0 || g.PhiBins <= 0 {
		return 0
	}
	return g.EtaBins * g.PhiBins
}

// EtaCentre returns the eta of the centre of cells in row ieta.
func (g Grid) EtaCentre(ieta int) float64 {
	return g.EtaMin + (float64(ieta)+0.5)*g.EtaStep
}

// PhiStep returns the width of one cell in phi, 2pi/PhiBins.
func (g Grid) PhiStep() float64 {
	return 2 * math.Pi / float64(g.PhiBins)
}

// PhiCentre returns the phi of the centre of cells in column iphi, in
// (-pi, pi). It is evaluated as written in the Grid comment, term by term,
// so that a tower whose Phi was computed the same way matches it exactly
// and its direction can be looked up instead of computed.
func (g Grid) PhiCentre(iphi int) float64 {
	return -math.Pi + (float64(iphi)+0.5)*2*math.Pi/float64(g.PhiBins)
}

// Tower is one calorimeter tower reading. ET is the transverse energy in
// GeV; Eta and Phi are the tower centre. Layer is 0 for the
// electromagnetic and 1 for the hadronic layer.
type Tower struct {
	Layer      uint8
	IEta, IPhi int
	Eta, Phi   float64
	ET         float64
}

// MuonHit is one muon-station hit: X and Y in the transverse plane and Z
// along the beam, in mm from the nominal interaction point. Station numbers
// the stations from the innermost, 0; a candidate uses at most one hit per
// station.
type MuonHit struct {
	Station int
	X, Y, Z float64
}

// GridTower is a tower at the centre of a cell of the grid: the compact
// form of Tower that services fed by the readout fill, 16 bytes against
// Tower's 48, with no direction to carry. It stands for
//
//	Tower{Layer: Layer, IEta: int(IEta), IPhi: int(IPhi),
//		Eta: grid.EtaCentre(int(IEta)), Phi: grid.PhiCentre(int(IPhi)), ET: ET}
//
// where grid is the FeatureConfig's Grid, and the features of an event are
// the same whichever form its towers take (TestGridTowersMatchTowers). A
// GridTower outside the grid is the Tower above too: it counts towards MET
// and sum ET where its extrapolated direction is finite, and is off the
// grid.
type GridTower struct {
	ET         float64
	IEta, IPhi uint16
	Layer      uint8
}

// CountTowers are towers in the form a readout sends them, 4 bytes
// each: a word holds an index into a table of cells in its low 16 bits
// and the tower's E_T in least counts in its high 16. Word w stands for
// the GridTower
//
//	t := Cells[w&0xffff]; t.ET = float64(w>>16) * GeVPerCount
//
// (the ET of the Cells entries is not used), so the features of an event
// are the same whether its towers come as CountTowers or as those
// GridTowers (TestCountTowersMatchGridTowers). A word whose index lies
// outside Cells stands for a tower with a NaN E_T: it is ignored and
// counted in Features.Bad. The form saves a service that decodes the
// readout's payloads itself from writing 16 bytes per tower to hand the
// selection what it read as 4.
type CountTowers struct {
	Words       []uint32
	Cells       []GridTower
	GeVPerCount float64
}

// AppendGridTowers appends the GridTowers c's words stand for to dst, in
// their order, and returns the result; a word off the table gives a
// GridTower with a NaN E_T at cell zero, which the features ignore and
// count in Features.Bad as they do the word.
func (c *CountTowers) AppendGridTowers(dst []GridTower) []GridTower {
	for _, w := range c.Words {
		if int(w&0xffff) >= len(c.Cells) {
			dst = append(dst, GridTower{ET: math.NaN()})
			continue
		}
		t := c.Cells[w&0xffff]
		t.ET = float64(w>>16) * c.GeVPerCount
		dst = append(dst, t)
	}
	return dst
}

// Event is what the selection sees of one bunch crossing: the calorimeter
// towers, the muon-station hits and the lumi slice the crossing belongs
// to. The towers are Towers, then GridTowers, then the words of Counted,
// in that order; any may be empty.
type Event struct {
	Towers     []Tower
	GridTowers []GridTower
	Counted    CountTowers
	MuonHits   []MuonHit
	LumiSlice  uint32
}

// NumTowers returns the number of towers of all forms.
func (ev *Event) NumTowers() int {
	return len(ev.Towers) + len(ev.GridTowers) + len(ev.Counted.Words)
}

// TowerAt returns tower i of the event, counting Towers first, then
// GridTowers, then the words of Counted, as a Tower with the direction of
// grid g. It panics if i is out of range.
func (ev *Event) TowerAt(i int, g Grid) Tower {
	if i < len(ev.Towers) {
		return ev.Towers[i]
	}
	i -= len(ev.Towers)
	if i >= len(ev.GridTowers) {
		c := &ev.Counted
		w := c.Words[i-len(ev.GridTowers)]
		if int(w&0xffff) >= len(c.Cells) {
			return Tower{ET: math.NaN()}
		}
		t := c.Cells[w&0xffff]
		return Tower{Layer: t.Layer, IEta: int(t.IEta), IPhi: int(t.IPhi), Eta: g.EtaCentre(int(t.IEta)), Phi: g.PhiCentre(int(t.IPhi)), ET: float64(w>>16) * c.GeVPerCount}
	}
	t := &ev.GridTowers[i]
	return Tower{Layer: t.Layer, IEta: int(t.IEta), IPhi: int(t.IPhi), Eta: g.EtaCentre(int(t.IEta)), Phi: g.PhiCentre(int(t.IPhi)), ET: t.ET}
}
