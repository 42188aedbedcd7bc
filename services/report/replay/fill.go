package replay

import (
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// towerTable decodes calorimeter payloads into trigger towers exactly as
// services/selector.FillEvent does (ET from least counts, eta and phi at
// the tower centres, towers off the grid or with zero counts skipped), but
// reads each tower's coordinates from a table made once per geometry
// instead of computing them per tower. It is immutable and safe for
// concurrent use.
type towerTable struct {
	towers []trigger.Tower // by global tower index, ET unset
	lsb    float64
}

func newTowerTable(g *detector.Geometry) *towerTable {
	t := &towerTable{towers: make([]trigger.Tower, g.Towers()), lsb: g.LeastCountGeV}
	for i := range t.towers {
		layer, ieta, iphi, _ := g.TowerCoords(i)
		t.towers[i] = trigger.Tower{Layer: uint8(layer), IEta: ieta, IPhi: iphi, Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi)}
	}
	return t
}

// fill decodes the calorimeter fragments into ev, reusing its storage.
func (t *towerTable) fill(fragments []*pb.Fragment, lumiSlice uint32, ev *trigger.Event) {
	total := 0
	for _, f := range fragments {
		if c := f.GetCalo(); c != nil {
			total += min(len(c.Towers), len(c.EtCounts))
		}
	}
	out := ev.Towers[:0]
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
			if counts[i] == 0 || int(idx) >= len(t.towers) {
				continue
			}
			tw := &out[j]
			*tw = t.towers[idx]
			// float64(counts) * least count, as Geometry.ET computes it.
			tw.ET = float64(counts[i]) * t.lsb
			j++
		}
	}
	ev.Towers = out[:j]
	ev.LumiSlice = lumiSlice
}
