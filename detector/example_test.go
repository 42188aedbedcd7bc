package detector_test

import (
	"fmt"

	"github.com/bunchsieve/bunchsieve/detector"
)

func ExamplePileUpMu() {
	// L = 1e34 cm^-2 s^-1, sigma_inel = 79.5 mb, 2808 bunches at 11.2455 kHz.
	fmt.Printf("mu = %.1f\n", detector.PileUpMu(1e34, 79.5, 2808, detector.RevolutionHz))
	// Output: mu = 25.2
}

func ExampleNewPhysicsGenerator() {
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		panic(err)
	}
	// One Z -> mu mu in every crossing, without pile-up.
	g, err := detector.NewPhysicsGenerator(d, part, 1, detector.PhysicsConfig{Force: "z-mumu", NoPileUp: true})
	if err != nil {
		panic(err)
	}
	var c detector.Crossing
	g.Generate(0, &c)
	muons := 0
	for _, o := range c.Truth.Objects {
		if o.Kind == detector.ObjectMuon {
			muons++
		}
	}
	fmt.Println(c.Truth.Process, muons, "muons,", len(c.MuonHits), "muon sources")
	fmt.Printf("weight %.2g per crossing\n", c.Truth.Weight)
	// Output:
	// z-mumu 2 muons, 8 muon sources
	// weight 7.3e-07 per crossing
}
