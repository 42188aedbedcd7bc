package trigger_test

import (
	"fmt"
	"math"
	"os"

	"github.com/bunchsieve/bunchsieve/trigger"
)

func ExampleMenu_Describe() {
	m, err := trigger.ParseMenu("example.yaml", []byte(`
menu: example
version: 1
features:
  jets: {finder: window, seed: 5 GeV, min_et: 20 GeV}
rules:
  met-120:     {when: "met > 0.12 TeV"}
  two-jets-80: {when: "count(jets, et > 80 GeV and abs(eta) < 2.8) >= 2", prescale: 2}
  random-keep: {keep_fraction: 0.01}
prescale_sets:
  quiet: {two-jets-80: 5, random-keep: off}
active_set: base
streams:
  physics:     [met-120, two-jets-80]
  calibration: [random-keep]
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	m.Describe(os.Stdout)
	// Output:
	// menu example (language version 1, hash 13e391f2fcca154e)
	// features:
	//   towers: eta_max=none eta_min=0 noise_cut=0 GeV
	//   jets: finder=window ht_min=20 GeV min_et=20 GeV seed=5 GeV
	// prescale sets: base (active), quiet
	//
	// RULE         CONDITION                                         BASE  QUIET  STREAMS
	// met-120      met > 120 GeV                                     1     1      physics
	// two-jets-80  count(jets, et > 80 GeV and abs(eta) < 2.8) >= 2  2     5      physics
	// random-keep  every event (keep_fraction 0.01)                  100   off    calibration
}

func ExampleSelector_Decide() {
	m, err := trigger.ParseMenu("example.yaml", []byte(`
menu: example
version: 1
rules:
  met-40: {when: "met > 40 GeV"}
streams:
  physics: [met-40]
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	s, err := trigger.NewSelector(m, trigger.Grid{EtaBins: 80, PhiBins: 64, EtaMin: -4, EtaStep: 0.1})
	if err != nil {
		fmt.Println(err)
		return
	}
	// 30 GeV at phi = 0 and 40 GeV at phi = pi/2: MET = 50 GeV.
	ev := &trigger.Event{LumiSlice: 1, Towers: []trigger.Tower{
		{Eta: 0.05, Phi: 0, ET: 30},
		{Eta: 0.05, Phi: math.Pi / 2, ET: 40},
	}}
	var d trigger.Decision
	s.Decide(ev, &d)
	fmt.Println(d.Accept, d.Passed, d.Kept, d.Streams, d.PrescaleSet)
	// Output:
	// true [true] [true] [physics] base
}
