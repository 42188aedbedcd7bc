package trigger

import (
	"math"
	"math/rand/v2"
	"testing"
)

// lanternGrid is the invented demo detector's calorimeter: towers of 0.1 in
// eta over |eta| < 4.0 and 2pi/64 in phi.
func lanternGrid() Grid { return Grid{EtaBins: 80, PhiBins: 64, EtaMin: -4.0, EtaStep: 0.1} }

// cellTower returns a tower of the given layer and E_T at grid cell
// (ieta, iphi), with eta and phi of the cell centre.
func cellTower(g Grid, layer uint8, ieta, iphi int, et float64) Tower {
	return Tower{Layer: layer, IEta: ieta, IPhi: iphi, Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi), ET: et}
}

// syntheticEvent returns an event of roughly n towers: soft deposits spread
// over the grid (pile-up-like, exponential E_T with a mean of 1.5 GeV) and
// a few hard clusters, so that every rule of the starter menu has work to do.
func syntheticEvent(rng *rand.Rand, g Grid, n int, slice uint32) *Event {
	ev := &Event{LumiSlice: slice}
	for i := 0; i < n; i++ {
		ieta, iphi := rng.IntN(g.EtaBins), rng.IntN(g.PhiBins)
		ev.Towers = append(ev.Towers, cellTower(g, uint8(rng.IntN(2)), ieta, iphi, rng.ExpFloat64()*1.5))
	}
	for k := 0; k < 1+rng.IntN(4); k++ {
		ieta, iphi := 10+rng.IntN(g.EtaBins-20), rng.IntN(g.PhiBins)
		core := 20 + rng.ExpFloat64()*80
		for de := -1; de <= 1; de++ {
			for dp := -1; dp <= 1; dp++ {
				share := 0.08
				if de == 0 && dp == 0 {
					share = 0.6
				}
				ev.Towers = append(ev.Towers, cellTower(g, uint8(k%2), ieta+de, (iphi+dp+g.PhiBins)%g.PhiBins, core*share))
			}
		}
	}
	return ev
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

func mustParse(t testing.TB, src string) *Menu {
	t.Helper()
	m, err := ParseMenu("test.yaml", []byte(src))
	if err != nil {
		t.Fatalf("ParseMenu: %v", err)
	}
	return m
}

func mustSelector(t testing.TB, m *Menu) *Selector {
	t.Helper()
	s, err := NewSelector(m, lanternGrid())
	if err != nil {
		t.Fatalf("NewSelector: %v", err)
	}
	return s
}
