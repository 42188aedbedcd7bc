package replay

import (
	"math/rand/v2"
	"reflect"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// The table decoder gives exactly the towers of selector.FillEvent, the
// selection service's decoder, bit for bit: on generated crossings and on
// payloads with zero counts, indices off the grid and lists of unequal
// length.
func TestTowerTableMatchesFillEvent(t *testing.T) {
	d := detector.DefaultDescription()
	g := d.Geometry
	part, err := detector.NewPartition(g, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 3, detector.PhysicsConfig{Mu: 40, LibraryEvents: 100})
	if err != nil {
		t.Fatal(err)
	}
	table := newTowerTable(g)
	r := rand.New(rand.NewPCG(1, 1))
	var c detector.Crossing
	var want, got trigger.Event
	for n := range 60 {
		gen.Generate(uint64(n), &c)
		var frags []*pb.Fragment
		for i, list := range c.PerSource {
			calo := &pb.CaloPayload{}
			for _, tc := range list {
				calo.Towers = append(calo.Towers, tc.Tower)
				calo.EtCounts = append(calo.EtCounts, tc.Counts)
			}
			switch n % 4 {
			case 1:
				calo.Towers = append(calo.Towers, uint32(g.Towers()+r.IntN(100)), 7)
				calo.EtCounts = append(calo.EtCounts, 5, 0)
			case 2:
				calo.EtCounts = append(calo.EtCounts, 9, 9)
			case 3:
				if len(calo.Towers) > 0 {
					calo.Towers = calo.Towers[:len(calo.Towers)-1]
				}
			}
			frags = append(frags, &pb.Fragment{SourceId: uint32(i + 1), Payload: &pb.Fragment_Calo{Calo: calo}})
		}
		frags = append(frags, &pb.Fragment{SourceId: 99, Payload: &pb.Fragment_Muon{Muon: &pb.MuonPayload{}}})
		selector.FillEvent(g, frags, uint32(n), &want)
		table.fill(frags, uint32(n), &got)
		if len(want.Towers) == 0 || !reflect.DeepEqual(got.Towers, want.Towers) || got.LumiSlice != want.LumiSlice {
			t.Fatalf("crossing %d: table gives %d towers, FillEvent %d (or they differ)", n, len(got.Towers), len(want.Towers))
		}
	}
}
