package trigger

import (
	"math"
	"slices"
)

// FeatureConfig says how features are computed from the towers of an
// event. The zero value is usable: every tower with a finite, non-negative
// E_T counts towards MET and sum ET, and no collections are built.
//
// The tower selection (noise cut and |eta| range) applies to every feature:
// MET, sum ET and the towers an algorithm sees.
type FeatureConfig struct {
	// Grid is the tower grid of the calorimeter. A zero or invalid Grid
	// puts every tower off the grid: grid-based collections stay empty.
	Grid Grid
	// NoiseCut in GeV: towers with E_T below it are ignored. Zero keeps
	// every tower with E_T >= 0; towers with negative E_T are always
	// ignored.
	NoiseCut float64
	// EtaMin and EtaMax bound |eta| of the towers used, both inclusive.
	// EtaMin zero: no lower bound; EtaMax zero: no upper bound.
	EtaMin, EtaMax float64
	// Collections are the object collections, built in order. Nil: none.
	Collections []CollectionConfig
}

// CollectionConfig names one collection and the algorithm that fills it.
type CollectionConfig struct {
	// Name is the name menus use, a lower-case identifier such as "jets".
	Name string
	// Algorithm fills the collection; it must not be nil.
	Algorithm Algorithm
}

// Features holds what ComputeFeatures derives from one event. The zero
// value is ready to use; a Features value reused for events with the same
// FeatureConfig does not allocate once its buffers have grown to the
// largest event seen. It is not safe for concurrent use.
type Features struct {
	// METx and METy are minus the vector sum of the selected towers' E_T,
	// in GeV; MET is their magnitude and METPhi = atan2(METy, METx), in
	// (-pi, pi], zero when MET is zero.
	METx, METy, MET, METPhi float64
	// SumET is the scalar sum of the selected towers' E_T, in GeV.
	SumET float64
	// Used counts the towers that passed the tower selection.
	Used int
	// Bad counts towers ignored because their E_T, eta or phi was NaN or
	// infinite, or their E_T beyond MaxTowerET.
	Bad int
	// OffGrid counts selected towers whose (IEta, IPhi) lies outside the
	// grid: they count towards MET and sum ET but no grid-based collection
	// sees them.
	OffGrid int

	scalars []float64    // met, met_phi, sumet, then each algorithm's scalars
	colls   []Collection // one per FeatureConfig.Collections
	outs    []Output
	// layoutOf is the Collections slice the buffers were laid out for.
	layoutOf []CollectionConfig
	// scalarFields holds each collection's Schema().Scalars, read once per
	// layout so that Scalar need not call Schema.
	scalarFields [][]Field
	in           Input

	// hotCut and layers are what the algorithms of the layout ask for
	// (CellNeeds): the cut of Input.Hot (+Inf: none) and the per-layer
	// cells.
	hotCut float64
	layers bool

	// phiTab holds the centre of each phi column of the grid and its sine
	// and cosine, the same values math.Sincos gives.
	phiTab []phiColumn
	// rowOK says per eta row whether GridTowers there pass the |eta|
	// range; rowsFor is the grid and range it was made for.
	rowOK   []bool
	rowsFor rowKey
}

// phiColumn is the direction of one phi column, kept together so that one
// tower's lookup reads one cache line.
type phiColumn struct{ centre, sin, cos float64 }

func (f *Features) phiTable(g Grid, valid bool) {
	f.phiTab = nil
	if !valid {
		return
	}
	f.phiTab = make([]phiColumn, g.PhiBins)
	for i := range f.phiTab {
		c := g.PhiCentre(i)
		s, co := math.Sincos(c)
		f.phiTab[i] = phiColumn{c, s, co}
	}
}

// etaSlack widens the eta bounds of the tower selection by far less than
// any tower's size, so that rounding of a cell centre computed one way or
// another cannot put a tower on the bound on one side of it.
const etaSlack = 1e-9

// etaRows returns, per eta row of g, whether the |eta| of its centre lies
// in [etaMin, etaMax], as the tower selection tests a Tower there. The
// table is kept for the next event with the same grid and range.
func (f *Features) etaRows(g Grid, valid bool, etaMin, etaMax float64) []bool {
	if !valid {
		return nil
	}
	if f.rowOK != nil && f.rowsFor == (rowKey{g, etaMin, etaMax}) {
		return f.rowOK
	}
	f.rowOK = make([]bool, g.EtaBins)
	for i := range f.rowOK {
		a := math.Abs(g.EtaCentre(i))
		f.rowOK[i] = a >= etaMin && a <= etaMax
	}
	f.rowsFor = rowKey{g, etaMin, etaMax}
	return f.rowOK
}

// rowKey is what a table of eta rows was made for.
type rowKey struct {
	g              Grid
	etaMin, etaMax float64
}

// Collection returns the collection called name, or nil.
func (f *Features) Collection(name string) *Collection {
	for i := range f.colls {
		if f.colls[i].name == name {
			return &f.colls[i]
		}
	}
	return nil
}

// Scalar returns the scalar feature called name (met, met_phi, sumet, or a
// scalar of an algorithm, such as ht), and false if there is none.
func (f *Features) Scalar(name string) (float64, bool) {
	switch name {
	case "met":
		return f.MET, true
	case "met_phi":
		return f.METPhi, true
	case "sumet":
		return f.SumET, true
	}
	for i := range f.outs {
		for j, fd := range f.scalarFields[i] {
			if fd.Name == name {
				return f.outs[i].Scalars[j], true
			}
		}
	}
	return 0, false
}

// layout prepares the buffers for cfg. It allocates only when the
// configuration differs from the previous call's.
//
// Two configurations are the same when they share the Collections slice;
// a FeatureConfig copied by value keeps sharing it.
func (f *Features) layout(cfg *FeatureConfig) {
	if f.scalars != nil && sameCollections(f.layoutOf, cfg.Collections) {
		return
	}
	f.layoutOf = cfg.Collections
	n := len(cfg.Collections)
	f.colls = make([]Collection, n)
	f.outs = make([]Output, n)
	f.scalarFields = make([][]Field, n)
	nsc := builtinScalars
	for i, cc := range cfg.Collections {
		sc := cc.Algorithm.Schema()
		f.colls[i] = Collection{name: cc.Name, fields: sc.Fields}
		f.scalarFields[i] = sc.Scalars
		nsc += len(sc.Scalars)
	}
	f.scalars = make([]float64, nsc)
	f.hotCut, f.layers = math.Inf(1), false
	for _, cc := range cfg.Collections {
		if r, ok := cc.Algorithm.(CellReader); ok {
			n := r.CellNeeds()
			if n.Hot {
				f.hotCut = min(f.hotCut, max(n.MinET, 0))
			}
			f.layers = f.layers || n.Layers
		}
	}
	k := builtinScalars
	for i := range f.outs {
		m := len(f.scalarFields[i])
		f.outs[i] = Output{Objects: &f.colls[i], Scalars: f.scalars[k : k+m : k+m]}
		k += m
	}
}

func sameCollections(a, b []CollectionConfig) bool {
	if len(a) != len(b) {
		return false
	}
	return len(a) == 0 || &a[0] == &b[0]
}

// finite reports whether x is neither NaN nor infinite.
func finite(x float64) bool { return x-x == 0 }

// MaxTowerET is the largest E_T a tower may carry, in GeV: far above what
// any collider's beams can put into one tower (the Meridian ring's
// 14 TeV in all), and small enough that the sums of every tower of any
// event stay finite. A tower beyond it is a unit or encoding mistake and
// is counted in Features.Bad, as NaN and infinite values are: two towers
// of 1e308 GeV would otherwise make MET and sum ET infinite, and pass
// every threshold.
const MaxTowerET = 1e6

// badET reports an E_T that is NaN, infinite or beyond MaxTowerET.
func badET(et float64) bool { return !(math.Abs(et) <= MaxTowerET) }

// ComputeFeatures fills f from the towers of ev under cfg. It reads ev and
// never keeps a reference to it beyond the next call with the same f.
// Towers with a non-finite E_T, eta or phi are ignored and counted in
// f.Bad; no tower value makes it panic. It panics if an Algorithm in cfg is
// nil. Calls with distinct f may run concurrently.
func ComputeFeatures(ev *Event, cfg FeatureConfig, f *Features) {
	computeFeatures(ev, &cfg, f)
}

func computeFeatures(ev *Event, cfg *FeatureConfig, f *Features) {
	f.layout(cfg)
	in := &f.in
	// Clear the cells of the previous event only, not the whole grid.
	if em := in.EMCells; em != nil {
		for _, c := range in.Touched {
			in.Cells[c], em[c] = 0, 0
		}
	} else {
		for _, c := range in.Touched {
			in.Cells[c] = 0
		}
	}
	in.Touched = in.Touched[:0]
	in.Selected = in.Selected[:0]
	in.Hot = in.Hot[:0]
	g := cfg.Grid
	cells := 0
	if g.Validate() == nil {
		cells = g.Cells()
	}
	if len(in.Cells) != cells || in.Grid != g {
		in.Cells = make([]float64, cells)
		in.EMCells = nil
		f.phiTable(g, cells > 0)
	}
	if f.layers && cells > 0 && in.EMCells == nil {
		in.EMCells = make([]float64, cells)
	}
	if !f.layers {
		in.EMCells = nil
	}
	in.Grid, in.Event = g, ev
	in.HotCut = f.hotCut

	// Towers with negative E_T are always ignored: lo folds that into the
	// noise cut. The fast path below tests the cuts only; a tower that
	// fails them, NaN and infinities included, is sorted out in the slow
	// path.
	lo := max(cfg.NoiseCut, 0)
	// The bounds are widened by etaSlack: a bound written at a tower
	// centre (eta_max: 1.15) must keep the towers there on both sides,
	// whose centres rounding puts at +1.1500000000000004 and
	// -1.1499999999999999.
	etaMin, etaMax := cfg.EtaMin-etaSlack, cfg.EtaMax+etaSlack
	if cfg.EtaMax <= 0 {
		etaMax = math.MaxFloat64
	}
	var sx, sy, sum float64
	bad, offGrid := 0, 0
	cellsV, em := in.Cells, in.EMCells
	layers := em != nil
	hotCut := f.hotCut
	neta, nphi := uint(0), uint(0)
	if cells > 0 {
		neta, nphi = uint(g.EtaBins), uint(g.PhiBins)
	}
	phiTab := f.phiTab
	towers := ev.Towers
	// Room for every tower and cell up front, so that the loop stores
	// without checking capacity. The cell lists get one slot more than
	// there are cells: the loop stores before it knows whether to count,
	// so a tower arriving when every cell is listed writes one past them.
	selected := slices.Grow(in.Selected[:0], len(towers))[:len(towers)]
	touched := slices.Grow(in.Touched[:0], cells+1)[:cells+1]
	hot := slices.Grow(in.Hot[:0], cells+1)[:cells+1]
	nsel, ntouch, nhot := 0, 0, 0
	for i := range towers {
		t := &towers[i]
		et := t.ET
		a := math.Abs(t.Eta)
		if !(et >= lo && et <= MaxTowerET && a >= etaMin && a <= etaMax) {
			if badET(et) || !finite(t.Eta) || !finite(t.Phi) {
				bad++
			}
			continue
		}
		var sin, cos float64
		if uint(t.IPhi) < uint(len(phiTab)) && phiTab[t.IPhi].centre == t.Phi {
			// Most towers sit at their cell centre: look the direction up.
			pc := &phiTab[t.IPhi]
			sin, cos = pc.sin, pc.cos
		} else {
			if !finite(t.Phi) {
				bad++
				continue
			}
			sin, cos = math.Sincos(t.Phi)
		}
		sx += et * cos
		sy += et * sin
		sum += et
		selected[nsel] = int32(i)
		nsel++
		if uint(t.IEta) >= neta || uint(t.IPhi) >= nphi {
			offGrid++
			continue
		}
		if et == 0 {
			continue // adds nothing, and a cell is touched only when it holds energy
		}
		c := t.IEta*int(nphi) + t.IPhi
		old := cellsV[c]
		// Stored always, counted when new: no branch to mispredict.
		touched[ntouch] = int32(c)
		if old == 0 {
			ntouch++
		}
		nv := old + et
		cellsV[c] = nv
		// E_T only grows, so a cell reaches the cut at most once.
		hot[nhot] = int32(c)
		if nv >= hotCut && (old < hotCut || old == 0) {
			nhot++
		}
		if layers && t.Layer == 0 {
			em[c] += et
		}
	}
	// The towers of grid cells: the same steps as above, with the
	// direction and the |eta| range looked up per column and row. Those
	// outside the grid take the steps above with their extrapolated
	// direction. The cell steps are written out again rather than shared:
	// this is the hottest loop of the selection, and a version with the
	// grid loop in a function of its own measured no faster (its values
	// spill to the stack either way); TestGridTowersMatchTowers and
	// TestGridTowersEdgeCases hold the two copies to the same results.
	if gts := ev.GridTowers; len(gts) > 0 {
		rowOK := f.etaRows(g, cells > 0, etaMin, etaMax)
		selected = slices.Grow(selected[:nsel], len(gts))[:nsel+len(gts)]
		base := int32(len(towers))
		for k := range gts {
			t := &gts[k]
			et := t.ET
			ieta, iphi := uint(t.IEta), uint(t.IPhi)
			if ieta >= neta || iphi >= nphi {
				eta, phi := g.EtaCentre(int(ieta)), g.PhiCentre(int(iphi))
				if a := math.Abs(eta); !(et >= lo && et <= MaxTowerET && a >= etaMin && a <= etaMax) || !finite(phi) {
					if badET(et) || !finite(eta) || !finite(phi) {
						bad++
					}
					continue
				}
				sin, cos := math.Sincos(phi)
				sx += et * cos
				sy += et * sin
				sum += et
				selected[nsel] = base + int32(k)
				nsel++
				offGrid++
				continue
			}
			if !(et >= lo && et <= MaxTowerET) || !rowOK[ieta] {
				if badET(et) {
					bad++
				}
				continue
			}
			pc := &phiTab[iphi]
			sx += et * pc.cos
			sy += et * pc.sin
			sum += et
			selected[nsel] = base + int32(k)
			nsel++
			if et == 0 {
				continue
			}
			c := ieta*nphi + iphi
			old := cellsV[c]
			touched[ntouch] = int32(c)
			if old == 0 {
				ntouch++
			}
			nv := old + et
			cellsV[c] = nv
			hot[nhot] = int32(c)
			if nv >= hotCut && (old < hotCut || old == 0) {
				nhot++
			}
			if layers && t.Layer == 0 {
				em[c] += et
			}
		}
	}
	// The words of CountTowers: the GridTower steps above, written out
	// once more for the same reason, with each tower's cell looked up in
	// the event's table and its E_T made from its counts;
	// TestCountTowersEdgeCases holds this copy to the others.
	if ct := &ev.Counted; len(ct.Words) > 0 {
		rowOK := f.etaRows(g, cells > 0, etaMin, etaMax)
		words, table, lsb := ct.Words, ct.Cells, ct.GeVPerCount
		selected = slices.Grow(selected[:nsel], len(words))[:nsel+len(words)]
		base := int32(len(towers) + len(ev.GridTowers))
		for k, w := range words {
			idx := uint(w & 0xffff)
			if idx >= uint(len(table)) {
				bad++
				continue
			}
			t := &table[idx]
			et := float64(w>>16) * lsb
			ieta, iphi := uint(t.IEta), uint(t.IPhi)
			if ieta >= neta || iphi >= nphi {
				eta, phi := g.EtaCentre(int(ieta)), g.PhiCentre(int(iphi))
				if a := math.Abs(eta); !(et >= lo && et <= MaxTowerET && a >= etaMin && a <= etaMax) || !finite(phi) {
					if badET(et) || !finite(eta) || !finite(phi) {
						bad++
					}
					continue
				}
				sin, cos := math.Sincos(phi)
				sx += et * cos
				sy += et * sin
				sum += et
				selected[nsel] = base + int32(k)
				nsel++
				offGrid++
				continue
			}
			if !(et >= lo && et <= MaxTowerET) || !rowOK[ieta] {
				if badET(et) {
					bad++
				}
				continue
			}
			pc := &phiTab[iphi]
			sx += et * pc.cos
			sy += et * pc.sin
			sum += et
			selected[nsel] = base + int32(k)
			nsel++
			if et == 0 {
				continue
			}
			c := ieta*nphi + iphi
			old := cellsV[c]
			touched[ntouch] = int32(c)
			if old == 0 {
				ntouch++
			}
			nv := old + et
			cellsV[c] = nv
			hot[nhot] = int32(c)
			if nv >= hotCut && (old < hotCut || old == 0) {
				nhot++
			}
			if layers && t.Layer == 0 {
				em[c] += et
			}
		}
	}
	selected, touched, hot = selected[:nsel], touched[:ntouch], hot[:nhot]
	used := nsel
	in.Selected, in.Touched, in.Hot = selected, touched, hot
	f.Used, f.Bad, f.OffGrid = used, bad, offGrid
	// 0 - s rather than -s, so that an empty event has METx = +0 and
	// METPhi = atan2(+0, +0) = 0 rather than -pi.
	f.METx, f.METy = 0-sx, 0-sy
	f.MET = math.Hypot(f.METx, f.METy)
	f.METPhi = 0
	if f.MET > 0 {
		f.METPhi = math.Atan2(f.METy, f.METx)
	}
	f.SumET = sum
	f.scalars[slotMET] = f.MET
	f.scalars[slotMETPhi] = f.METPhi
	f.scalars[slotSumET] = f.SumET
	for i, cc := range cfg.Collections {
		o := &f.outs[i]
		o.Objects.Reset()
		clear(o.Scalars)
		cc.Algorithm.Run(in, o)
	}
	in.Event = nil // do not keep the event alive in a pooled Features
}
