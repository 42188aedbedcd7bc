package trigger

import (
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
)

// TestLanternPhysicsMenu checks the realistic example menu: it parses, has
// about sixty rules over every object type, the three prescale sets, its
// streams, a pass-through rule, and every rule feeds a stream.
func TestLanternPhysicsMenu(t *testing.T) {
	m, err := LoadMenu(physicsMenuPath)
	if err != nil {
		t.Fatal(err)
	}
	if m.Name != "lantern-physics" || m.ActiveSet != "nominal" {
		t.Fatalf("menu %q active %q", m.Name, m.ActiveSet)
	}
	if n := len(m.Rules); n < 55 || n > 70 {
		t.Fatalf("%d rules, want about 60", n)
	}
	if got := m.SetNames(); !slices.Equal(got, []string{BaseSet, "nominal", "high-mu", "low-rate"}) {
		t.Fatalf("sets %v", got)
	}
	finders := map[string]string{}
	for i, cc := range m.Features.Collections {
		finders[cc.Name] = strings.Fields(m.features[i+1])[2]
	}
	for _, f := range []string{"finder=antikt", "finder=window", "finder=em-cluster", "finder=muon-road", "finder=narrow-cluster"} {
		found := false
		for _, v := range finders {
			found = found || v == f
		}
		if !found {
			t.Errorf("no collection with %s: %v", f, finders)
		}
	}
	used := map[string]bool{}
	passThrough, disabled := 0, 0
	for _, r := range m.Rules {
		if r.PassThrough() {
			passThrough++
		}
		if r.Disabled {
			disabled++
		}
		for name := range finders {
			if strings.Contains(r.When, name+"[") || strings.Contains(r.When, "("+name+",") || strings.Contains(r.When, "("+name+")") || strings.Contains(r.When, name+"_ht") {
				used[name] = true
			}
		}
		inStream := false
		for _, s := range m.Streams {
			inStream = inStream || slices.Contains(s.Rules, r.Name)
		}
		if !inStream {
			t.Errorf("rule %s feeds no stream", r.Name)
		}
	}
	if passThrough != 1 || disabled != 1 {
		t.Errorf("%d pass-through and %d disabled rules, want 1 of each", passThrough, disabled)
	}
	for name := range finders {
		if !used[name] {
			t.Errorf("collection %s is used by no rule", name)
		}
	}
	if len(m.Streams) < 3 {
		t.Errorf("%d streams", len(m.Streams))
	}
	for _, set := range m.SetNames() {
		if _, err := m.Prescales(set); err != nil {
			t.Error(err)
		}
	}
}

// TestLanternPhysicsOnGeneratedEvents runs the example menu on crossings
// from the detector package's generator at mu = 60 and compares the
// objects with the generator's truth: Z -> mu mu gives two candidates of
// opposite charge near the true muons and fires dimuon-z; Z -> e e gives
// isolated clusters near the electrons and fires di-em-z.
func TestLanternPhysicsOnGeneratedEvents(t *testing.T) {
	m, err := LoadMenu(physicsMenuPath)
	if err != nil {
		t.Fatal(err)
	}
	geo := detector.DefaultDescription().Geometry
	s, err := NewSelector(m, lanternGeometryGrid(geo))
	if err != nil {
		t.Fatal(err)
	}
	n := 40
	if testing.Short() {
		n = 15
	}
	for _, c := range []struct {
		process, rule, coll string
		kind                detector.ObjectKind
		ptTol               float64
	}{
		{"z-mumu", "dimuon-z", "muons", detector.ObjectMuon, 0.05},
		{"z-ee", "di-em-z", "ems", detector.ObjectElectron, 0.12},
	} {
		evs, truth := physicsEvents(t, n, 60, c.process, 5)
		ri := m.RuleIndex(c.rule)
		var d Decision
		var f Features
		clean, fired := 0, 0
		for i, ev := range evs {
			var leptons []detector.TruthObject
			for _, o := range truth[i].Objects {
				if o.Kind == c.kind {
					leptons = append(leptons, o)
				}
			}
			// Leptons well inside the acceptance and above the thresholds.
			ok := len(leptons) == 2
			for _, l := range leptons {
				ok = ok && l.PT > 25 && math.Abs(l.Eta) < 2.2
			}
			if !ok {
				continue
			}
			clean++
			s.Decide(ev, &d)
			s.ComputeFeatures(ev, &f)
			col := f.Collection(c.coll)
			for _, l := range leptons {
				best, bi := math.Inf(1), -1
				for k := 0; k < col.Len(); k++ {
					eta, _ := col.Value(k, "eta")
					phi, _ := col.Value(k, "phi")
					if dr := DeltaR(eta, phi, l.Eta, l.Phi); dr < best {
						best, bi = dr, k
					}
				}
				if bi < 0 || best > 0.1 {
					t.Errorf("%s event %d: no %s near the true lepton %+v (nearest dR %v)", c.process, i, c.coll, l, best)
					continue
				}
				pt := col.At(bi, 0)
				if math.Abs(pt-l.PT) > c.ptTol*l.PT {
					t.Errorf("%s event %d: %s pT %v, true %v", c.process, i, c.coll, pt, l.PT)
				}
				if q, ok := col.Value(bi, "charge"); ok && q != l.Charge {
					t.Errorf("%s event %d: charge %v, true %v", c.process, i, q, l.Charge)
				}
			}
			if d.Passed[ri] {
				fired++
			}
		}
		t.Logf("%s: %s fired on %d of %d crossings with both leptons in the acceptance", c.process, c.rule, fired, clean)
		if clean < n/4 {
			t.Fatalf("%s: only %d of %d crossings with both leptons in the acceptance", c.process, clean, n)
		}
		if fired < clean*8/10 {
			t.Errorf("%s: %s fired on %d of %d clean crossings", c.process, c.rule, fired, clean)
		}
	}

	// Multijets above 100 GeV of pT_hat: every hard parton (pT > 80 GeV,
	// |eta| < 2.5) has an anti-kt jet (cells of 3 GeV and more) within dR
	// 0.4 holding at least half its pT. Jets are not partons; the bound is
	// loose on purpose.
	evs, truth := physicsEventsWith(t, n, detector.PhysicsConfig{Mu: 60, Force: "multijet", JetPtMinGeV: 100, LibraryEvents: 300}, 9)
	var f Features
	hard := 0
	for i, ev := range evs {
		s.ComputeFeatures(ev, &f)
		jets := f.Collection("jets")
		for _, o := range truth[i].Objects {
			if (o.Kind != detector.ObjectQuark && o.Kind != detector.ObjectGluon && o.Kind != detector.ObjectBQuark) || o.PT < 80 || math.Abs(o.Eta) > 2.5 {
				continue
			}
			hard++
			found := false
			for k := 0; k < jets.Len(); k++ {
				et, _ := jets.Value(k, "et")
				eta, _ := jets.Value(k, "eta")
				phi, _ := jets.Value(k, "phi")
				found = found || (DeltaR(eta, phi, o.Eta, o.Phi) < 0.4 && et > o.PT/2)
			}
			if !found {
				t.Errorf("multijet event %d: no jet for the parton %+v", i, o)
			}
		}
	}
	t.Logf("multijet: %d hard partons, each with its jet", hard)
	if hard < n/2 {
		t.Errorf("only %d hard partons in %d multijet crossings", hard, n)
	}
}
