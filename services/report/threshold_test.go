package report

import (
	"errors"
	"testing"
)

func TestThresholdsOfStarterMenu(t *testing.T) {
	m, _ := starter(t)
	for _, c := range []struct {
		rule, param string
		want        string // context
		gev         float64
	}{
		{"met-120", "met", "met > 120 GeV", 120},
		{"met-120", "t1", "met > 120 GeV", 120},
		{"two-jets-80", "et", "et > 80 GeV", 80},
		{"one-jet-180", "jets[0].et", "jets[0].et > 180 GeV", 180},
		{"dijet-mass-500", "t2", "mass(jets[0], jets[1]) > 500 GeV", 500},
		{"dijet-mass-500", "mass(jets[0], jets[1])", "mass(jets[0], jets[1]) > 500 GeV", 500},
		{"jet-met-60", "met", "met > 60 GeV", 60},
	} {
		r := &m.Rules[m.RuleIndex(c.rule)]
		th, _, err := findThreshold(r, c.param)
		if err != nil {
			t.Errorf("%s:%s: %v", c.rule, c.param, err)
			continue
		}
		if th.context != c.want || th.gev != c.gev {
			t.Errorf("%s:%s = %q (%v GeV), want %q", c.rule, c.param, th.context, th.gev, c.want)
		}
	}
	for _, c := range []struct{ rule, param string }{
		{"met-120", "t2"}, {"met-120", "ht"}, {"random-keep", "t1"}, {"jet-met-60", "jets[0].eta"},
	} {
		if _, _, err := findThreshold(&m.Rules[m.RuleIndex(c.rule)], c.param); !errors.Is(err, ErrBadSpec) {
			t.Errorf("%s:%s: %v, want a specification error", c.rule, c.param, err)
		}
	}
	r := &m.Rules[m.RuleIndex("two-jets-80")]
	th, _, _ := findThreshold(r, "t1")
	if got := substitute(r.When, th, 62.5); got != "count(jets, et > 62.5 GeV and abs(eta) < 2.8) >= 2" {
		t.Errorf("substituted: %q", got)
	}
}

func TestParseSpecs(t *testing.T) {
	sc, err := ParseScan("met-120:met=50:200:10")
	if err != nil || sc.Rule != "met-120" || sc.Param != "met" || len(sc.Values.Values()) != 16 {
		t.Errorf("scan %+v %v", sc, err)
	}
	if v := (Range{From: 0.1, To: 0.3, Step: 0.1}).Values(); len(v) != 3 {
		t.Errorf("0.1:0.3:0.1 gives %v", v)
	}
	ef, err := ParseEfficiency("met-120:truth-met=0:300:10")
	if err != nil || ef.Reference != "truth-met" || ef.Bins.To != 300 {
		t.Errorf("efficiency %+v %v", ef, err)
	}
	if ef, err := ParseEfficiency("one-jet-180:jets[0].et"); err != nil || ef.Reference != "jets[0].et" || ef.Bins != (Range{}) {
		t.Errorf("efficiency %+v %v", ef, err)
	}
	ls, err := ParseLumiScale("2e34:5e34")
	if err != nil || ls.To/ls.From != 2.5 {
		t.Errorf("scale %+v %v", ls, err)
	}
	for _, bad := range []string{"met-120", "met-120:met", "met-120:met=1:2", "met-120:met=5:1:1", "met-120:met=0:10:0", "x:y=0:1e9:1e-3", "met-120:met=a:b:c"} {
		if _, err := ParseScan(bad); !errors.Is(err, ErrBadSpec) {
			t.Errorf("scan %q: %v", bad, err)
		}
	}
	for _, bad := range []string{"met-120", ":truth-met", "met-120:", "met-120:truth-met=1:0:1"} {
		if _, err := ParseEfficiency(bad); !errors.Is(err, ErrBadSpec) {
			t.Errorf("efficiency %q: %v", bad, err)
		}
	}
	for _, bad := range []string{"2e34", "0:1e34", "-1:2", "a:b", "1e34:inf"} {
		if _, err := ParseLumiScale(bad); !errors.Is(err, ErrBadSpec) {
			t.Errorf("scale %q: %v", bad, err)
		}
	}
}
