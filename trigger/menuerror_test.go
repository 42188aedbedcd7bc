package trigger

import (
	"errors"
	"strings"
	"testing"
	"unicode/utf8"
)

const goodHead = "menu: m\nversion: 1\n"

// badMenus are malformed menus, each with the one error it must give.
// Positions are 1-based line and character column of the offending token,
// counted by hand from the text.
var badMenus = []struct {
	name      string
	src       string
	line, col int
	rule      string
	found     string // substring of Found
	expected  string // substring of Expected
}{
	{"yaml unclosed flow mapping",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\"\n  ht-300: {when: \"ht > 300 GeV\"}\n",
		4, 12, "", "YAML error", "well-formed YAML"},
	{"yaml colon in a plain value",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\"}\n  b: when: x\n",
		5, 10, "", "mapping values are not allowed", "well-formed YAML"},
	// The YAML library names the line where the mapping began; the
	// position given is the line indented to no level of it.
	{"yaml key indented too little",
		goodHead + "rules:\n  a: {when: \"met > 1 GeV\"}\n b: {when: \"met > 2 GeV\"}\n",
		5, 2, "", "indentation, 1 space, matches no level", "indented as the other keys"},
	{"yaml key indented too far",
		goodHead + "rules:\n  a: {when: \"met > 1 GeV\"}\n   b: {when: \"met > 2 GeV\"}\n",
		5, 4, "", "indentation, 3 spaces, matches no level", "indented as the other keys"},
	{"yaml key indented too far after a flow mapping over two lines",
		goodHead + "rules:\n  a: {when: \"met > 1 GeV\",\n      prescale: 2}  # two lines\n   b: {when: \"met > 2 GeV\"}\n",
		6, 4, "", "indentation, 3 spaces, matches no level", "indented as the other keys"},
	{"yaml tab indentation",
		goodHead + "rules:\n\tmet-120: {when: \"met > 120 GeV\"}\n",
		4, 1, "", "YAML error", "well-formed YAML"},
	{"unknown finder",
		goodHead + "features:\n  jets: {finder: cone, radius: 0.4}\nrules:\n  j: {when: \"count(jets) > 1\"}\n",
		4, 18, "", `unknown finder "cone"`, "antikt, em-cluster, muon-road, narrow-cluster, window"},
	{"missing unit",
		goodHead + "rules:\n  met-120: {when: \"met > 120\"}\n",
		4, 26, "met-120", "120 without a unit", "120 GeV"},
	{"missing unit on the left",
		goodHead + "rules:\n  met-120: {when: \"120 < met\"}\n",
		4, 20, "met-120", "120 without a unit", "120 GeV"},
	{"wrong unit on a dimensionless quantity",
		goodHead + "features:\n  jets: {finder: window}\nrules:\n  central: {when: \"abs(jets[0].eta) < 2.8 GeV\"}\n",
		6, 43, "central", "unit GeV next to abs(jets[0].eta)", "plain number"},
	{"wrong unit in a feature parameter",
		goodHead + "features:\n  towers: {eta_max: 4.0 GeV}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 25, "", "unit GeV on eta_max", "plain number"},
	{"missing unit in a feature parameter",
		goodHead + "features:\n  jets: {finder: window, seed: 5}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 32, "", "seed 5 without a unit", "5 GeV"},
	{"unknown unit",
		goodHead + "rules:\n  m: {when: \"met > 120 gev\"}\n",
		4, 24, "m", `unit "gev"`, "GeV, TeV or MeV"},
	{"NaN threshold in a parameter",
		goodHead + "features:\n  jets: {finder: window, seed: NaN GeV}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 32, "", "seed NaN", "finite"},
	{"NaN threshold in YAML spelling",
		goodHead + "features:\n  towers: {noise_cut: .nan}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 23, "", "noise_cut .nan", "finite"},
	{"NaN threshold in a condition",
		goodHead + "rules:\n  m: {when: \"met > NaN GeV\"}\n",
		4, 20, "m", `"NaN"`, "finite"},
	{"infinite threshold",
		goodHead + "rules:\n  m: {when: \"met > 1e999 GeV\"}\n",
		4, 20, "m", "out of range", "finite"},
	{"duplicate rule name",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\"}\n  met-120: {when: \"met > 121 GeV\"}\n",
		5, 3, "", `duplicate rule name "met-120" (first on line 4)`, "one rule only"},
	{"stream naming an unknown rule",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\"}\nstreams:\n  physics: [met-120, met-150]\n",
		6, 22, "", `unknown rule "met-150" in stream "physics"`, "met-120"},
	{"prescale set naming an unknown rule",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\"}\nprescale_sets:\n  quiet:\n    met-12: 4\n",
		7, 5, "", `unknown rule "met-12" in prescale set "quiet"`, "met-120"},
	{"bad expression",
		goodHead + "rules:\n  met-120: {when: \"met >> 120 GeV\"}\n",
		4, 25, "met-120", `">"`, "a number"},
	{"unclosed parenthesis",
		goodHead + "rules:\n  j: {when: \"(met > 1 GeV\"}\n",
		4, 26, "j", "end of expression", `")"`},
	{"chained comparison",
		goodHead + "rules:\n  j: {when: \"1 GeV < met < 9 GeV\"}\n",
		4, 26, "j", `"<"`, "x in a .. b"},
	{"unknown name",
		goodHead + "rules:\n  j: {when: \"mett > 1 GeV\"}\n",
		4, 14, "j", `unknown name "mett"`, "met, met_phi, sumet"},
	{"condition is a number",
		goodHead + "rules:\n  j: {when: \"met\"}\n",
		4, 14, "j", `"met", an energy`, "a condition"},
	{"empty menu", "", 1, 1, "", "an empty file", "menu"},
	{"menu of comments only", "# nothing yet\n", 1, 1, "", "an empty file", "menu"},
	{"empty document", "---\n", 1, 1, "", "an empty menu", "menu"},
	{"unknown top-level key",
		goodHead + "rule:\n  met-120: {when: \"met > 120 GeV\"}\n",
		3, 1, "", `unknown key "rule" in the menu`, "rules"},
	{"unknown rule key",
		goodHead + "rules:\n  met-120: {when: \"met > 120 GeV\", prescal: 10}\n",
		4, 36, "met-120", `unknown key "prescal" in a rule`, "prescale"},
	{"unknown parameter of a finder",
		goodHead + "features:\n  jets: {finder: window, radius: 0.4}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 26, "", `unknown key "radius" in jets`, "min_et"},
	{"unknown tower key",
		goodHead + "features:\n  towers: {noise: 1 GeV}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 12, "", `unknown key "noise" in towers`, "noise_cut"},
	{"wrong version", "menu: m\nversion: 3\nrules:\n  m: {when: \"met > 1 GeV\"}\n", 2, 10, "", "version 3", "version 1"},
	{"missing version", "menu: m\nrules:\n  m: {when: \"met > 1 GeV\"}\n", 1, 1, "", "no version", "version: 1"},
	{"no rules", goodHead + "rules: {}\n", 3, 1, "", "no rules", "at least one rule"},
	{"prescale zero", goodHead + "rules:\n  m: {when: \"met > 1 GeV\", prescale: 0}\n", 4, 38, "m", "prescale 0", "integer >= 1"},
	{"keep_fraction above one", goodHead + "rules:\n  k: {keep_fraction: 2}\n", 4, 22, "k", "keep_fraction", "0 < f <= 1"},
	{"keep_fraction zero", goodHead + "rules:\n  k: {keep_fraction: 0}\n", 4, 22, "k", "keep_fraction", "0 < f <= 1"},
	{"keep_fraction with when", goodHead + "rules:\n  k: {when: \"met > 1 GeV\", keep_fraction: 0.5}\n", 4, 28, "k", "keep_fraction together with when", "one of them"},
	{"rule without condition", goodHead + "rules:\n  k: {prescale: 3}\n", 4, 3, "k", "without when or keep_fraction", "when"},
	{"unknown active set", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nactive_set: loud\n", 5, 13, "", "active_set \"loud\"", "base"},
	{"prescale set called base", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  base: {m: 2}\n", 6, 3, "", `called "base"`, "another name"},
	{"bad prescale in a set", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  quiet: {m: none}\n", 6, 14, "", `prescale "none"`, "or off"},
	{"prescale zero in a set", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  quiet: {m: 0}\n", 6, 14, "", `prescale 0 for rule "m" in prescale set "quiet"`, "an integer >= 1 and <= 9007199254740992, or off"},
	{"duplicate top-level key", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nrules:\n  n: {when: \"met > 1 GeV\"}\n", 5, 1, "", `key "rules" a second time`, "each key once"},
	{"jets without a jets block", goodHead + "rules:\n  j: {when: \"jets[0].et > 1 GeV\"}\n", 4, 14, "j", `unknown collection "jets"`, "none is configured"},
	{"unknown field", goodHead + "features:\n  jets: {finder: window}\nrules:\n  j: {when: \"jets[0].pt > 1 GeV\"}\n", 6, 22, "j", `unknown field "pt" of jets`, "et, eta, phi"},
	{"energy compared with eta", goodHead + "features:\n  jets: {finder: window}\nrules:\n  j: {when: \"count(jets, et > eta) > 0\"}\n", 6, 29, "j", "an energy > a dimensionless number", "same kind"},
	{"mass of a number", goodHead + "features:\n  jets: {finder: window}\nrules:\n  j: {when: \"mass(met, jets[0]) > 1 GeV\"}\n", 6, 19, "j", `"met", an energy`, "an object"},
	{"second YAML document", goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\n---\nmenu: n\n", 5, 1, "", "a second YAML document", "one menu per file"},
	{"error inside a block scalar",
		goodHead + "rules:\n  m:\n    when: |\n      met > 100 GeV and\n      sumet > 5\n",
		7, 15, "m", "5 without a unit", "5 GeV"},
	{"error inside a folded scalar",
		goodHead + "rules:\n  m:\n    when: >-\n      met > 100 GeV and\n      ht > 5 GeV\n",
		7, 7, "m", `unknown name "ht"`, "met"},
	{"error after an escape in a double-quoted scalar",
		goodHead + "rules:\n  m: {when: \"met > 1 GeV and \\\"x\\\" > 1\"}\n",
		4, 30, "m", `character "\""`, "a number"},
	{"error after hex escapes in a double-quoted scalar",
		goodHead + "rules:\n  m: {when: \"met >\\x20\\x20120\"}\n",
		4, 27, "m", "120 without a unit", "120 GeV"},
	{"error after a doubled quote in a single-quoted scalar",
		goodHead + "rules:\n  m: {when: 'met > 1 GeV and '' > 1'}\n",
		4, 30, "m", `character "'"`, "a number"},
	// The parameters of the finders added with anti-kt, EM clusters and
	// muons. Columns counted from the text: "  jets: {finder: antikt, "
	// is 25 characters.
	{"unit on the anti-kt radius",
		goodHead + "features:\n  jets: {finder: antikt, radius: 0.4 GeV}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 38, "", "unit GeV on radius", "plain number"},
	{"NaN anti-kt radius",
		goodHead + "features:\n  jets: {finder: antikt, radius: NaN}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 34, "", "radius NaN", "finite"},
	{"anti-kt radius out of range",
		goodHead + "features:\n  jets: {finder: antikt, radius: 3}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 34, "", "radius 3", "0 < R <= 1.5"},
	{"anti-kt min_et without a unit",
		goodHead + "features:\n  jets: {finder: antikt, min_et: 20}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 34, "", "min_et 20 without a unit", "20 GeV"},
	{"anti-kt inputs of an unknown kind",
		goodHead + "features:\n  jets: {finder: antikt, inputs: pixels}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 34, "", `inputs "pixels"`, "cells or towers"},
	{"unknown parameter of anti-kt",
		goodHead + "features:\n  jets: {finder: antikt, cone: 0.4}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 26, "", `unknown key "cone" in jets (finder antikt)`, "radius"},
	{"muon candidates from one station",
		goodHead + "features:\n  muons: {finder: muon-road, min_stations: 1}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 44, "", "min_stations 1", "at least 2"},
	{"EM isolation ring too wide",
		goodHead + "features:\n  ems: {finder: em-cluster, ring: 5}\nrules:\n  m: {when: \"met > 1 GeV\"}\n",
		4, 35, "", "ring 5", "1, 2 or 3"},
	{"unknown field of muons",
		goodHead + "features:\n  muons: {finder: muon-road}\nrules:\n  m: {when: \"muons[0].et > 20 GeV\"}\n",
		6, 23, "m", `unknown field "et" of muons`, "pt, eta, phi, charge, stations"},
	{"unit on a charge",
		goodHead + "features:\n  muons: {finder: muon-road}\nrules:\n  m: {when: \"count(muons, charge == 1 GeV) > 0\"}\n",
		6, 39, "m", "unit GeV next to charge", "plain number"},
	{"multi-line plain scalar",
		goodHead + "rules:\n  m:\n    when: met > 100 GeV\n      and sumet > 7\n",
		6, 19, "m", "7 without a unit", "7 GeV"},
}

func TestMalformedMenus(t *testing.T) {
	for _, c := range badMenus {
		t.Run(c.name, func(t *testing.T) {
			m, err := ParseMenu("bad.yaml", []byte(c.src))
			if err == nil {
				t.Fatalf("accepted:\n%s", m.Canonical())
			}
			var me *MenuError
			if !errors.As(err, &me) {
				t.Fatalf("error %T %v, want *MenuError", err, err)
			}
			if me.File != "bad.yaml" || me.Line != c.line || me.Col != c.col || me.Rule != c.rule {
				t.Errorf("at %s:%d:%d rule %q, want bad.yaml:%d:%d rule %q (%v)", me.File, me.Line, me.Col, me.Rule, c.line, c.col, c.rule, err)
			}
			if !strings.Contains(me.Found, c.found) || !strings.Contains(me.Expected, c.expected) {
				t.Errorf("found %q, expected %q; want them to contain %q and %q", me.Found, me.Expected, c.found, c.expected)
			}
		})
	}
}

// A prescale out of range in a set reads as one in a rule does: what was
// found and whose it is, then what is allowed, the bound with the integer
// and "off" as the alternative (not "off and <= N").
func TestPrescaleSetErrorReadsLikeARules(t *testing.T) {
	for _, c := range []struct{ src, want string }{
		{goodHead + "rules:\n  m: {when: \"met > 1 GeV\", prescale: 0}\n",
			`bad.yaml:4:38: rule "m": found prescale 0, expected an integer >= 1 and <= 9007199254740992`},
		{goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  quiet: {m: 0}\n",
			`bad.yaml:6:14: found prescale 0 for rule "m" in prescale set "quiet", expected an integer >= 1 and <= 9007199254740992, or off`},
		{goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  quiet: {m: -3}\n",
			`bad.yaml:6:14: found prescale -3 for rule "m" in prescale set "quiet", expected an integer >= 1 and <= 9007199254740992, or off`},
		{goodHead + "rules:\n  m: {when: \"met > 1 GeV\"}\nprescale_sets:\n  quiet: {m: 2.5}\n",
			`bad.yaml:6:14: found prescale "2.5" for rule "m" in prescale set "quiet", expected an integer >= 1, or off`},
	} {
		_, err := ParseMenu("bad.yaml", []byte(c.src))
		if err == nil || err.Error() != c.want {
			t.Errorf("got  %v\nwant %s", err, c.want)
		}
	}
}

func TestTrailingEmptyDocumentIsFine(t *testing.T) {
	mustParse(t, goodHead+"rules:\n  m: {when: \"met > 1 GeV\"}\n---\n")
}

func TestMenuErrorFormat(t *testing.T) {
	e := &MenuError{File: "m.yaml", Line: 4, Col: 26, Found: "number 120 without a unit", Expected: "an energy", Rule: "met-120"}
	if got, want := e.Error(), `m.yaml:4:26: rule "met-120": found number 120 without a unit, expected an energy`; got != want {
		t.Errorf("got %q\nwant %q", got, want)
	}
	e.Rule = ""
	if got, want := e.Error(), `m.yaml:4:26: found number 120 without a unit, expected an energy`; got != want {
		t.Errorf("got %q\nwant %q", got, want)
	}
}

func TestLoadMenuMissingFile(t *testing.T) {
	if _, err := LoadMenu(t.TempDir() + "/none.yaml"); err == nil || !strings.HasPrefix(err.Error(), "trigger: ") {
		t.Fatalf("err %v, want a trigger: error", err)
	}
}

// A prescale set name sent from outside is quoted shortened in the error,
// which ends up in logs, and a cut never splits a character.
func TestUnknownSetNameClipped(t *testing.T) {
	m, err := ParseMenu("m.yaml", []byte(goodHead+"rules:\n  a: {when: \"met > 1 GeV\"}\n"))
	if err != nil {
		t.Fatal(err)
	}
	long := strings.Repeat("é", 60000)
	_, err = m.Prescales(long)
	if !errors.Is(err, ErrUnknownPrescaleSet) || len(err.Error()) > 200 || !strings.Contains(err.Error(), "(120000 bytes)") {
		t.Fatalf("error of %d bytes: %.200s", len(err.Error()), err)
	}
	if !utf8.ValidString(err.Error()) {
		t.Fatal("the shortened name splits a character")
	}
}
