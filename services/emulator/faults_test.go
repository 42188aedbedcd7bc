package emulator

import (
	"reflect"
	"strings"
	"testing"
)

func TestParseFault(t *testing.T) {
	f, err := ParseFault("sources=3+5-7,drop=0.05,duplicate=0.02,corrupt=0.01,delay=0.01,reorder=0.1,stall=100-200,clock_skew_ns=40")
	if err != nil {
		t.Fatal(err)
	}
	want := Fault{Sources: []uint32{3, 5, 6, 7}, Drop: 0.05, Duplicate: 0.02, Corrupt: 0.01, Delay: 0.01, DelayCrossings: 16,
		Reorder: 0.1, StallFrom: 100, StallTo: 200, ClockSkewNs: 40}
	if !reflect.DeepEqual(f, want) {
		t.Fatalf("got %+v\nwant %+v", f, want)
	}
	for spec, msg := range map[string]string{
		"drop=1.5":             "fraction",
		"drop":                 "key=value",
		"loss=0.1":             "unknown",
		"sources=0":            "source ids",
		"stall=200-100":        "empty",
		"stall=5":              "FROM-TO",
		"drop=0.6,dup=0.1":     "unknown",
		"drop=0.6,corrupt=0.6": "exceed",
	} {
		if _, err := ParseFault(spec); err == nil || !strings.Contains(err.Error(), msg) {
			t.Errorf("%q: error %v, want one mentioning %q", spec, err, msg)
		}
	}
}

// The injector's choice depends only on seed, crossing and source, so a
// run with faults is reproducible.
func TestInjectorDeterministic(t *testing.T) {
	faults := []Fault{{Drop: 0.2, Duplicate: 0.2, Corrupt: 0.2, Delay: 0.2, DelayCrossings: 3, Reorder: 0.5}}
	a, _ := newInjector(9, faults, []uint32{1, 2, 3})
	b, _ := newInjector(9, faults, []uint32{1, 2, 3})
	counts := map[action]int{}
	for n := uint64(0); n < 2000; n++ {
		for _, s := range []uint32{3, 1, 2} {
			x, rx := a.decide(a.fault(s), n, s)
			y, ry := b.decide(b.fault(s), n, s)
			if x != y || rx != ry {
				t.Fatalf("crossing %d source %d: %v/%v vs %v/%v", n, s, x, rx, y, ry)
			}
			counts[x]++
		}
	}
	// Each of the five outcomes has probability 0.2 of 6000 draws: 1200 +- 31.
	for act := send; act <= delay; act++ {
		if c := counts[act]; c < 1050 || c > 1350 {
			t.Errorf("action %d drawn %d times of 6000, want about 1200", act, c)
		}
	}
	if _, err := newInjector(1, []Fault{{Sources: []uint32{9}, Drop: 0.1}}, []uint32{1}); err == nil {
		t.Error("a fault naming a source the emulator does not run must be refused")
	}
}
