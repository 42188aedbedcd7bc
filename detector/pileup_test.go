package detector

import (
	"math"
	"math/bits"
	"testing"
)

// Overlaying a library event rotated by k phi bins and mirrored in z puts
// each deposit where rotating and mirroring its tower coordinates puts it,
// for power-of-two and other numbers of phi bins.
func TestLibraryOverlayRotatesAndMirrors(t *testing.T) {
	for _, phiBins := range []string{"64", "72"} {
		d := describe(t, "phi_bins: 64", "phi_bins: "+phiBins)
		g := d.Geometry
		part, err := NewPartition(g, 8)
		if err != nil {
			t.Fatal(err)
		}
		lib := newMinBiasLibrary(g, part, 3, 20)
		rs := newResponse(g, part)
		for _, rot := range []int{0, 1, 17, g.PhiBins - 1} {
			for m := range 2 {
				deps := lib.deps[m][lib.start[5]:lib.start[6]]
				if g.PhiBins&(g.PhiBins-1) == 0 {
					addRotatedMask(rs.et, rs.hit, deps, rot, g.PhiBins-1)
				} else {
					addRotated(rs.et, rs.hit, deps, rot, g.PhiBins)
				}
				want := map[int]float32{}
				for _, dp := range lib.deps[0][lib.start[5]:lib.start[6]] {
					l, ie, _, _ := g.TowerCoords(int(dp.ring0))
					if m == 1 {
						ie = g.EtaBins - 1 - ie
					}
					want[g.TowerIndex(l, ie, (int(dp.iphi)+rot)%g.PhiBins)] += dp.et
				}
				got := 0
				for w, word := range rs.hit {
					for ; word != 0; word &= word - 1 {
						tw := w<<6 | bits.TrailingZeros64(word)
						if math.Abs(float64(rs.et[tw]-want[tw])) > 1e-6 {
							t.Fatalf("%s bins, rot %d, mirror %d: tower %d has %v, want %v", phiBins, rot, m, tw, rs.et[tw], want[tw])
						}
						got++
					}
				}
				if got != len(want) || got == 0 {
					t.Fatalf("%s bins, rot %d: %d towers, want %d", phiBins, rot, got, len(want))
				}
				rs.clear()
			}
		}
	}
}

// GeneratorConfig.MeanPileUp gives the mu the generators themselves use:
// the toy generator's (default 20), and the physics generator's, set
// directly or from the luminosity (PhysicsGenerator.Mu).
func TestMeanPileUpIsTheGenerators(t *testing.T) {
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	if mu := (GeneratorConfig{}).MeanPileUp(d); mu != 20 {
		t.Errorf("toy generator default: mu %v, want 20", mu)
	}
	if mu := (GeneratorConfig{Kind: GeneratorSimple, Simple: SimpleConfig{Mu: 35}, Physics: PhysicsConfig{Mu: 60}}).MeanPileUp(d); mu != 35 {
		t.Errorf("toy generator: mu %v, want its own 35", mu)
	}
	for _, pc := range []PhysicsConfig{{Mu: 60, LibraryEvents: 10}, {Luminosity: 2e34, LibraryEvents: 10}, {LibraryEvents: 10}} {
		g, err := NewPhysicsGenerator(d, part, 1, pc)
		if err != nil {
			t.Fatal(err)
		}
		if mu := (GeneratorConfig{Kind: GeneratorPhysics, Physics: pc}).MeanPileUp(d); mu != g.Mu() {
			t.Errorf("physics %+v: MeanPileUp %v, the generator's mu %v", pc, mu, g.Mu())
		}
	}
}
