package trigger

import (
	"strings"
	"testing"
)

const hashBase = `menu: lantern-hash
version: 1
features:
  towers: {noise_cut: 0.5 GeV, eta_max: 4.0}
  jets:   {finder: window, seed: 5 GeV, min_et: 20 GeV}
rules:
  met-150:     {when: "met > 150 GeV"}
  sumet-900:   {when: "sumet > 900 GeV", prescale: 10}
  two-jets-80: {when: "count(jets, et > 80 GeV and abs(eta) < 2.8) >= 2"}
  random-keep: {keep_fraction: 0.001}
prescale_sets:
  nominal: {sumet-900: 10}
  quiet:   {sumet-900: 40, random-keep: off}
streams:
  physics:     [met-150, two-jets-80]
  calibration: [random-keep]
`

// hashSame says the same thing as hashBase in other words: block style,
// other quoting, comments, other units, explicit defaults, redundant
// parentheses and spacing, sets and stream entries in another order with
// the active set written out.
const hashSame = `# the same menu, written differently
menu: lantern-hash
version: 1
features:
  jets:
    finder: window
    seed: 5000 MeV
    min_et: 0.02 TeV
    ht_min: 20 GeV
  towers:
    noise_cut: 500 MeV
    eta_max: 4
    eta_min: 0
rules:
  met-150:
    when: '(met) >  0.15 TeV'
    prescale: 1
  sumet-900:
    prescale: 10
    when: >-
      sumet
      > 900.0 GeV
  two-jets-80:
    when: "count( jets , (et>80GeV) and abs(eta)<2.80 )>=2"
  random-keep: {keep_fraction: 0.0010004}   # also rounds to prescale 1000
prescale_sets:
  quiet:   {random-keep: off, sumet-900: 40}
  nominal: {}
active_set: nominal
streams:
  physics:     [two-jets-80, met-150]
  calibration:
    - random-keep
`

func TestMenuHashIgnoresFormatting(t *testing.T) {
	a, b := mustParse(t, hashBase), mustParse(t, hashSame)
	if a.Hash != b.Hash {
		t.Fatalf("hashes differ: %s vs %s\n--- base\n%s--- same\n%s", a.Hash, b.Hash, a.Canonical(), b.Canonical())
	}
	if len(a.Hash) != 16 {
		t.Fatalf("hash %q, want 16 hex digits", a.Hash)
	}
	// The name is not part of the meaning.
	renamed := mustParse(t, strings.Replace(hashBase, "menu: lantern-hash", "menu: other-name", 1))
	if renamed.Hash != a.Hash {
		t.Errorf("renaming the menu changed its hash")
	}
}

func TestMenuHashSeesChanges(t *testing.T) {
	base := mustParse(t, hashBase)
	changes := []struct{ name, old, new string }{
		{"threshold", "met > 150 GeV", "met > 151 GeV"},
		{"threshold by a hair", "met > 150 GeV", "met > 150.000001 GeV"},
		{"operator", "met > 150 GeV", "met >= 150 GeV"},
		{"prescale", "prescale: 10}", "prescale: 11}"},
		{"noise cut", "noise_cut: 0.5 GeV", "noise_cut: 0.6 GeV"},
		{"eta range", "eta_max: 4.0", "eta_max: 3.0"},
		{"jet seed", "seed: 5 GeV", "seed: 6 GeV"},
		{"set prescale", "quiet:   {sumet-900: 40", "quiet:   {sumet-900: 41"},
		{"active set", "streams:", "active_set: quiet\nstreams:"},
		{"stream membership", "physics:     [met-150, two-jets-80]", "physics:     [met-150]"},
		{"keep fraction", "keep_fraction: 0.001", "keep_fraction: 0.002"},
		{"disabled", "met-150:     {when: \"met > 150 GeV\"}", "met-150:     {when: \"met > 150 GeV\", disabled: true}"},
		{"rule name", "met-150:", "met-155:"},
		{"grouping", "et > 80 GeV and abs(eta) < 2.8", "et > 80 GeV and abs(eta) < 2.9"},
	}
	seen := map[string]string{base.Hash: "base"}
	for _, c := range changes {
		src := strings.Replace(hashBase, c.old, c.new, 1)
		if src == hashBase {
			t.Fatalf("%s: replacement did not apply", c.name)
		}
		if c.name == "rule name" {
			src = strings.ReplaceAll(src, "met-150", "met-155")
		}
		m := mustParse(t, src)
		if prev, dup := seen[m.Hash]; dup {
			t.Errorf("%s: hash %s same as %s", c.name, m.Hash, prev)
		}
		seen[m.Hash] = c.name
	}
	// Reordering rules changes decision layout, hence meaning.
	swapped := strings.Replace(hashBase, "  met-150:     {when: \"met > 150 GeV\"}\n  sumet-900:   {when: \"sumet > 900 GeV\", prescale: 10}\n",
		"  sumet-900:   {when: \"sumet > 900 GeV\", prescale: 10}\n  met-150:     {when: \"met > 150 GeV\"}\n", 1)
	if swapped == hashBase || mustParse(t, swapped).Hash == base.Hash {
		t.Error("reordering rules kept the hash")
	}
}
