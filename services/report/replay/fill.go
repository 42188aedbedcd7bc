package replay

import (
	"math"
	"slices"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// towerTable decodes fragment payloads into the selection's event exactly
// as services/selector.FillEvent does (calorimeter towers as
// trigger.GridTowers with ET from least counts, towers off the grid or
// with zero counts skipped, muon-station hits in mm), but reads each
// tower's cell from a table made once per geometry instead of computing
// it per tower. A geometry whose bins do not fit a GridTower gets Towers
// at the tower centres, as FillEvent gives it. It is immutable and safe
// for concurrent use.
type towerTable struct {
	// cells holds each tower's GridTower with ET unset, by global index:
	// filling an event copies it and sets ET, two 8-byte moves.
	cells []trigger.GridTower
	lsb   float64
	// wide, for a geometry too large for GridTowers, holds the Towers by
	// global index with ET unset; nil otherwise.
	wide []trigger.Tower
}

func newTowerTable(g *detector.Geometry) *towerTable {
	t := &towerTable{lsb: g.LeastCountGeV}
	grid := g.EtaBins <= math.MaxUint16 && g.PhiBins <= math.MaxUint16 && detector.Layers <= math.MaxUint8+1
	if !grid {
		t.wide = make([]trigger.Tower, g.Towers())
		for i := range t.wide {
			layer, ieta, iphi, _ := g.TowerCoords(i)
			t.wide[i] = trigger.Tower{Layer: uint8(layer), IEta: ieta, IPhi: iphi, Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi)}
		}
		return t
	}
	t.cells = make([]trigger.GridTower, g.Towers())
	for i := range t.cells {
		layer, ieta, iphi, _ := g.TowerCoords(i)
		t.cells[i] = trigger.GridTower{IEta: uint16(ieta), IPhi: uint16(iphi), Layer: uint8(layer)}
	}
	return t
}

// fill decodes the fragments into ev, reusing its storage.
func (t *towerTable) fill(fragments []*pb.Fragment, lumiSlice uint32, ev *trigger.Event) {
	ev.LumiSlice = lumiSlice
	ev.Towers, ev.GridTowers, ev.MuonHits = ev.Towers[:0], ev.GridTowers[:0], ev.MuonHits[:0]
	ev.Counted.Words = ev.Counted.Words[:0]
	total := 0
	for _, f := range fragments {
		total += t.countPayload(f, ev)
	}
	if t.wide != nil {
		t.fillWide(fragments, total, ev)
		return
	}
	out := growTowers(ev.GridTowers, total)
	j := 0
	for _, f := range fragments {
		if c := f.GetCalo(); c != nil {
			j += t.gridOf(c, out[j:])
		}
	}
	ev.GridTowers = out[:j]
}

// fillSlots is fill for the fragments of slots. The towers of fused
// slots (fuser.fuseFields), already checked against the table, are handed
// over as they are, as the words of trigger.CountTowers on the table's
// cells, when no other slot has towers; else every slot's towers become
// GridTowers, in slot order either way, so the features do not depend on
// the form. t must be the grid table the slots were fused with.
func (t *towerTable) fillSlots(slots []*slot, lumiSlice uint32, ev *trigger.Event) {
	ev.LumiSlice = lumiSlice
	ev.Towers, ev.GridTowers, ev.MuonHits = ev.Towers[:0], ev.GridTowers[:0], ev.MuonHits[:0]
	ev.Counted.Words = ev.Counted.Words[:0]
	total := 0
	counted := true
	for _, s := range slots {
		if s.fused {
			total += len(s.towers)
			continue
		}
		if s.f.GetCalo() != nil {
			counted = false
		}
		total += t.countPayload(&s.f, ev)
	}
	if counted {
		words := slices.Grow(ev.Counted.Words, total)
		for _, s := range slots {
			if s.fused {
				words = append(words, s.towers...)
			}
		}
		ev.Counted = trigger.CountTowers{Words: words, Cells: t.cells, GeVPerCount: t.lsb}
		return
	}
	out := growTowers(ev.GridTowers, total)
	j := 0
	for _, s := range slots {
		if s.fused {
			j += t.gridOfWords(s.towers, out[j:])
			continue
		}
		if c := s.f.GetCalo(); c != nil {
			j += t.gridOf(c, out[j:])
		}
	}
	ev.GridTowers = out[:j]
}

// countPayload appends the muon hits of f to ev and returns the number
// of tower and count pairs of its calorimeter payload, a bound on its
// towers.
func (t *towerTable) countPayload(f *pb.Fragment, ev *trigger.Event) int {
	switch p := f.Payload.(type) {
	case *pb.Fragment_Calo:
		return min(len(p.Calo.Towers), len(p.Calo.EtCounts))
	case *pb.Fragment_Muon:
		for _, h := range p.Muon.Hits {
			ev.MuonHits = append(ev.MuonHits, trigger.MuonHit{Station: int(h.Station), X: float64(h.XMm), Y: float64(h.YMm), Z: float64(h.ZMm)})
		}
	}
	return 0
}

// growTowers returns out resliced to n towers, reallocated when too
// small.
func growTowers(out []trigger.GridTower, n int) []trigger.GridTower {
	if cap(out) < n {
		out = make([]trigger.GridTower, 0, n+n/4)
	}
	return out[:n]
}

// gridOfWords writes the grid towers of a fused slot's towers to out,
// which has room for them, and returns their number.
func (t *towerTable) gridOfWords(tws []towerWord, out []trigger.GridTower) int {
	cells := t.cells
	out = out[:len(tws)]
	for i, w := range tws {
		g := cells[w&0xffff]
		g.ET = float64(w>>16) * t.lsb
		out[i] = g
	}
	return len(tws)
}

// gridOf writes the grid towers of c to out, which has room for one per
// pair, and returns their number.
func (t *towerTable) gridOf(c *pb.CaloPayload, out []trigger.GridTower) int {
	cells := t.cells
	counts := c.EtCounts
	towers := c.Towers[:min(len(c.Towers), len(counts))]
	counts = counts[:len(towers)]
	j := 0
	for i, idx := range towers {
		if counts[i] == 0 || int(idx) >= len(cells) {
			continue
		}
		g := cells[idx]
		// float64(counts) * least count, as Geometry.ET computes it.
		g.ET = float64(counts[i]) * t.lsb
		out[j] = g
		j++
	}
	return j
}

// fillWide is fill's calorimeter part for a wide geometry.
func (t *towerTable) fillWide(fragments []*pb.Fragment, total int, ev *trigger.Event) {
	out := ev.Towers
	if cap(out) < total {
		out = make([]trigger.Tower, 0, total+total/4)
	}
	out = out[:total]
	j := 0
	for _, f := range fragments {
		c := f.GetCalo()
		if c == nil {
			continue
		}
		counts := c.EtCounts
		towers := c.Towers[:min(len(c.Towers), len(counts))]
		counts = counts[:len(towers)]
		for i, idx := range towers {
			if counts[i] == 0 || int(idx) >= len(t.wide) {
				continue
			}
			tw := &out[j]
			*tw = t.wide[idx]
			tw.ET = float64(counts[i]) * t.lsb
			j++
		}
	}
	ev.Towers = out[:j]
}
