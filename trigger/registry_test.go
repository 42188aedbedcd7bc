package trigger

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
)

// towerObjects is a test algorithm: every selected tower with E_T >=
// minPT becomes an object with fields pt, eta, phi, the highest first, at
// most maxCount of them. It shows that a new collection needs no change to
// the expression engine.
type towerObjects struct {
	minPT    float64
	maxCount int
}

func (a *towerObjects) Schema() Schema {
	return Schema{Fields: []Field{{"pt", Energy}, {"eta", Number}, {"phi", Angle}}, Scalars: []Field{{"n_hard", Number}}}
}

func (a *towerObjects) Run(in *Input, out *Output) {
	buf, _ := out.Scratch.(*[]Tower)
	if buf == nil {
		buf = new([]Tower)
		out.Scratch = buf
	}
	*buf = (*buf)[:0]
	for _, i := range in.Selected {
		if t := in.Event.TowerAt(int(i), in.Grid); t.ET >= a.minPT {
			*buf = append(*buf, t)
		}
	}
	slices.SortStableFunc(*buf, func(x, y Tower) int {
		switch {
		case x.ET > y.ET:
			return -1
		case x.ET < y.ET:
			return 1
		}
		return 0
	})
	for k, t := range *buf {
		if k == a.maxCount {
			break
		}
		out.Objects.Add(t.ET, t.Eta, t.Phi)
	}
	out.Scalars[0] = float64(len(*buf))
}

func newTowerObjects(p *Params) (Algorithm, error) {
	a := &towerObjects{minPT: p.Energy("min_pt", 0), maxCount: p.Int("max_count", 8)}
	if a.maxCount < 1 {
		p.Fail("max_count", fmt.Sprintf("max_count %d", a.maxCount), "at least 1")
	}
	if p.String("mode", "all") != "all" {
		return nil, errors.New("only mode all is supported")
	}
	return a, p.Err()
}

func testRegistry() *Registry {
	r := NewRegistry()
	RegisterStandard(r)
	r.Register("tower-objects", newTowerObjects)
	return r
}

const dimuonMenu = `menu: dimuon
version: 1
features:
  muons: {finder: tower-objects, min_pt: 10 GeV, max_count: 4}
rules:
  dimuon-z: {when: "count(muons, pt > 15 GeV) >= 2 and mass(muons[0], muons[1]) in 70 GeV .. 110 GeV"}
  hard:     {when: "muons_n_hard >= 1"}
`

func TestNewCollectionNeedsNoEngineChange(t *testing.T) {
	src := strings.Replace(dimuonMenu, "muons_n_hard", "n_hard", 1)
	m, err := ParseMenuWith("dimuon.yaml", []byte(src), testRegistry())
	if err != nil {
		t.Fatal(err)
	}
	s := mustSelector(t, m)
	// Two objects of 45.594 GeV back to back at equal eta: M = 2 * 45.594
	// = 91.188 GeV (PDG "Kinematics": M^2 = 2 pT1 pT2 (cosh 0 - cos pi)).
	ev := &Event{Towers: []Tower{{ET: 45.594, Eta: 0.4, Phi: 0.3}, {ET: 45.594, Eta: 0.4, Phi: 0.3 - math.Pi}, {ET: 3, Eta: 1, Phi: 1}}}
	var d Decision
	s.Decide(ev, &d)
	if !d.Passed[0] || !d.Passed[1] {
		t.Fatalf("passed %v, want both", d.Passed)
	}
	ev.Towers[1].Phi = 0.3 - math.Pi/2 // M = 45.594 * 2 * sin(pi/4) = 64.5, below the window
	s.Decide(ev, &d)
	if d.Passed[0] {
		t.Fatal("dimuon-z passed at M = 64.5 GeV")
	}
}

func TestFactoryErrors(t *testing.T) {
	reg := testRegistry()
	for _, c := range []struct {
		name, old, new string
		line, col      int
		found          string
	}{
		{"Fail", "max_count: 4", "max_count: 0", 4, 61, "max_count 0"},
		{"plain error", "max_count: 4", "mode: some", 4, 3, "only mode all"},
		{"Int", "max_count: 4", "max_count: four", 4, 61, `max_count "four"`},
		{"unknown scalar name", "", "", 7, 21, `unknown name "muons_n_hard"`},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := ParseMenuWith("dimuon.yaml", []byte(strings.Replace(dimuonMenu, c.old, c.new, 1)), reg)
			var me *MenuError
			if !errors.As(err, &me) || me.Line != c.line || me.Col != c.col || !strings.Contains(me.Found, c.found) {
				t.Fatalf("err %v, want %d:%d found %q", err, c.line, c.col, c.found)
			}
		})
	}
	if _, err := ParseMenu("dimuon.yaml", []byte(dimuonMenu)); err == nil || !strings.Contains(err.Error(), `unknown finder "tower-objects"`) {
		t.Fatalf("standard registry: %v", err)
	}
}

func TestRegistry(t *testing.T) {
	r := NewRegistry()
	r.Register("zeta", newTowerObjects)
	r.Register("alpha", newTowerObjects)
	if got := r.Names(); !slices.Equal(got, []string{"alpha", "zeta"}) {
		t.Fatalf("Names %v", got)
	}
	if _, ok := r.Lookup("alpha"); !ok {
		t.Fatal("Lookup failed")
	}
	if _, ok := r.Lookup("beta"); ok {
		t.Fatal("Lookup found an unregistered name")
	}
	for name, reg := range map[string]func(){
		"empty name": func() { r.Register("", newTowerObjects) },
		"nil":        func() { r.Register("beta", nil) },
		"duplicate":  func() { r.Register("alpha", newTowerObjects) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			reg()
		}()
	}
	if got := StandardRegistry().Names(); !slices.Equal(got, []string{"antikt", "em-cluster", "muon-road", "narrow-cluster", "window"}) {
		t.Fatalf("standard algorithms %v", got)
	}
}

func TestNewSelectorChecksGrid(t *testing.T) {
	m := mustParse(t, exprMenuHead+"  r: {when: 'count(jets) > 0'}\n")
	for _, g := range []Grid{{}, {EtaBins: 80, PhiBins: 2, EtaStep: 0.1}, {EtaBins: 80, PhiBins: 64, EtaStep: math.NaN()}} {
		if _, err := NewSelector(m, g); err == nil {
			t.Errorf("grid %+v accepted", g)
		}
	}
	// A menu without grid-based collections needs no grid.
	if _, err := NewSelector(mustParse(t, "menu: m\nversion: 1\nrules:\n  r: {when: 'met > 1 GeV'}\n"), Grid{}); err != nil {
		t.Fatal(err)
	}
	if _, err := NewSelector(&Menu{}, lanternGrid()); err == nil {
		t.Fatal("hand-made menu accepted")
	}
}

func TestDecideFeaturesMatchesDecide(t *testing.T) {
	s := mustSelector(t, mustParse(t, exprMenuHead+"  r: {when: 'count(jets, et > 60 GeV) == 1 and met > 40 GeV'}\n  d: {when: 'met > 0 GeV', disabled: true}\n"))
	ev := twoJetEvent()
	var d1, d2 Decision
	s.Decide(ev, &d1)
	var f Features
	s.ComputeFeatures(ev, &f)
	s.DecideFeatures(&f, ev.LumiSlice, &d2)
	if !d1.Passed[0] || d1.Passed[1] || !slices.Equal(d1.Passed, d2.Passed) || !slices.Equal(d1.Kept, d2.Kept) {
		t.Fatalf("Decide %+v, DecideFeatures %+v", d1, d2)
	}
	if c := s.Counts(); c[1] != (RuleCount{Name: "d"}) {
		t.Fatalf("disabled rule counted: %+v", c[1])
	}
	defer func() {
		if recover() == nil {
			t.Fatal("foreign features accepted")
		}
	}()
	var other Features
	ComputeFeatures(ev, FeatureConfig{}, &other)
	s.DecideFeatures(&other, 0, &d2)
}
