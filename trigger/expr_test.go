package trigger

import "testing"

const exprMenuHead = `menu: expr
version: 1
features:
  jets: {finder: window, seed: 1 GeV}
rules:
`

// evalRule parses a one-rule menu with condition cond and reports whether
// ev passes it.
func evalRule(t *testing.T, cond string, ev *Event) bool {
	t.Helper()
	m := mustParse(t, exprMenuHead+"  r: {when: '"+cond+"'}\n")
	s := mustSelector(t, m)
	var d Decision
	s.Decide(ev, &d)
	return d.Passed[0]
}

// twoJetEvent has a 100 GeV jet at (eta 0.05, cell phi 10) and a 50 GeV jet
// at (eta -1.95, cell phi 42), MET 50 GeV pointing away from the first.
func twoJetEvent() *Event {
	g := lanternGrid()
	return &Event{Towers: []Tower{cellTower(g, 0, 40, 10, 100), cellTower(g, 1, 20, 42, 50)}}
}

func TestConditionSemantics(t *testing.T) {
	ev := twoJetEvent()
	cases := []struct {
		cond string
		want bool
	}{
		{"jets[0].et == 100 GeV", true},
		{"jets[1].et == 50 GeV", true},
		{"jets[0].et == 0.1 TeV and jets[1].et == 50000 MeV", true},
		{"count(jets) == 2", true},
		{"count(jets, et > 60 GeV) == 1", true},
		{"count(jets, abs(eta) < 1) == 1", true},
		// An index beyond the collection makes every comparison false,
		// != included; not inverts that as usual.
		{"jets[2].et > 0 GeV", false},
		{"jets[2].et < 0 GeV", false},
		{"jets[2].et != 5 GeV", false},
		{"jets[2].et == jets[2].et", false},
		{"not jets[2].et > 0 GeV", true},
		{"jets[2].eta in -5 .. 5", false},
		{"mass(jets[0], jets[2]) > 0 GeV", false},
		// Windows are inclusive at both ends.
		{"jets[0].et in 100 GeV .. 200 GeV", true},
		{"jets[0].et in 50 GeV .. 100 GeV", true},
		{"jets[0].et in 100.001 GeV .. 200 GeV", false},
		// Arithmetic and kinds: a ratio of energies is a plain number.
		{"jets[1].et / jets[0].et == 0.5", true},
		{"jets[0].et - jets[1].et == 50 GeV", true},
		{"2 * jets[1].et == jets[0].et", true},
		{"sumet == jets[0].et + jets[1].et", true},
		{"met / sumet < 0.5", true},
		{"-jets[0].et < -99 GeV", true},
		{"1 + 2 * 3 == 7", true},
		{"(1 + 2) * 3 == 9", true},
		{"10 - 4 - 3 == 3", true},
		// Precedence: not binds looser than a comparison, and tighter than and.
		{"not met > 1000 GeV and met > 1 GeV", true},
		{"met > 1000 GeV or met > 1 GeV and sumet > 1 GeV", true},
		{"(met > 1000 GeV or met > 1 GeV) and sumet > 1000 GeV", false},
		// Angles compare with plain numbers.
		{"dphi(jets[0], jets[1]) in 0 .. pi", true},
		{"dphi(jets[0], met_phi) > 3", true},
		{"dr(jets[0], jets[1]) > 2", true},
		{"abs(met_phi) <= pi", true},
		// Nested count: the inner fields shadow the outer ones.
		{"count(jets, count(jets, et > 60 GeV) == 1) == 2", true},
	}
	for _, c := range cases {
		if got := evalRule(t, c.cond, ev); got != c.want {
			t.Errorf("%s: %v, want %v", c.cond, got, c.want)
		}
	}
}

// The closure for mass agrees with InvariantMass on the jets' own values.
func TestMassCondition(t *testing.T) {
	ev := twoJetEvent()
	m := mustParse(t, exprMenuHead+"  r: {when: 'met > 0 GeV'}\n")
	var f Features
	ComputeFeatures(ev, FeatureConfig{Grid: lanternGrid(), Collections: m.Features.Collections}, &f)
	j := f.Collection("jets")
	want := InvariantMass(j.At(0, 0), j.At(0, 1), j.At(0, 2), j.At(1, 0), j.At(1, 1), j.At(1, 2))
	lo, hi := formatNumber(want-1e-6), formatNumber(want+1e-6)
	if !evalRule(t, "mass(jets[0], jets[1]) in "+lo+" GeV .. "+hi+" GeV", ev) {
		t.Fatalf("mass condition does not bracket %v", want)
	}
}

func TestPrintedConditionReadsBack(t *testing.T) {
	for _, src := range []string{
		"count(jets, et > 80 GeV and abs(eta) < 2.8) >= 2",
		"not (met > 1 GeV or sumet > 2 GeV)",
		"met - (sumet - ht) > 0.5 TeV",
		"met / (sumet / 2) > 0.3",
		"- -met < 0 GeV",
		"not not met > 1 GeV",
		"a and (b and c)",
		"jets[3].phi in -pi .. pi / 2",
		"mass(jets[0], jets[1]) in 70 GeV .. 110 GeV",
		"met > 1e3 GeV",
		"met > 1.5e-3 TeV",
	} {
		tree, err := parseExpr(src)
		if err != nil {
			t.Fatalf("%s: %v", src, err)
		}
		once := printExpr(tree)
		tree2, err := parseExpr(once)
		if err != nil {
			t.Fatalf("%s printed as %s, which does not parse: %v", src, once, err)
		}
		if twice := printExpr(tree2); twice != once {
			t.Errorf("%s: printed %q, then %q", src, once, twice)
		}
	}
	tree, _ := parseExpr("met > 1e3 GeV and x > 1.5e-3 TeV")
	if got := printExpr(tree); got != "met > 1000 GeV and x > 1.5 GeV" {
		t.Errorf("normalised numbers: %q", got)
	}
}

// Unit conversion shifts the decimal exponent instead of multiplying, so
// that every spelling of an energy gives the same float64.
func TestUnitConversionIsExact(t *testing.T) {
	for _, c := range []struct {
		lit   string
		shift int
		want  float64
	}{{"0.15", 3, 150}, {"0.1", 3, 100}, {"150000", -3, 150}, {"1.7", 3, 1700}, {"2.5e-2", 3, 25}, {"0.3", 3, 300}} {
		got, ok := parseScaled(c.lit, c.shift)
		if !ok || got != c.want {
			t.Errorf("%se%d = %v, want exactly %v", c.lit, c.shift, got, c.want)
		}
	}
	if _, ok := parseScaled("1e400", 0); ok {
		t.Error("1e400 accepted")
	}
	if v, ok := parseScaled("1e-400", 0); !ok || v != 0 {
		t.Error("1e-400 should underflow to 0")
	}
}
