package trigger

import (
	"errors"
	"io"
	"os"
	"testing"
)

func FuzzParseMenu(f *testing.F) {
	for _, path := range []string{starterPath, physicsMenuPath} {
		if data, err := os.ReadFile(path); err == nil {
			f.Add(data)
		}
	}
	f.Add([]byte(hashBase))
	f.Add([]byte(hashSame))
	f.Add([]byte(prescaleMenu))
	for _, c := range badMenus {
		f.Add([]byte(c.src))
	}
	g := lanternGrid()
	ev := &Event{LumiSlice: 1, Towers: []Tower{cellTower(g, 0, 40, 10, 120), cellTower(g, 1, 41, 10, 30), cellTower(g, 0, 12, 50, 60)}}
	ev.MuonHits = helixHits(40, 0.5, 1, 1, 0, 3, lanternStations)
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ParseMenu("fuzz.yaml", data)
		if err != nil {
			var me *MenuError
			if !errors.As(err, &me) {
				t.Fatalf("error %T %v, want *MenuError", err, err)
			}
			if me.Line < 1 || me.Col < 1 || me.Found == "" || me.Expected == "" || me.File != "fuzz.yaml" {
				t.Fatalf("incomplete error %+v", me)
			}
			return
		}
		if err := m.Describe(io.Discard); err != nil {
			t.Fatal(err)
		}
		again, err := ParseMenu("fuzz.yaml", data)
		if err != nil || again.Hash != m.Hash {
			t.Fatalf("second parse: %v, hash %s vs %s", err, again.Hash, m.Hash)
		}
		s, err := NewSelector(m, g)
		if err != nil {
			t.Fatal(err)
		}
		var d Decision
		s.Decide(ev, &d)
		if len(d.Passed) != len(m.Rules) {
			t.Fatalf("%d results for %d rules", len(d.Passed), len(m.Rules))
		}
	})
}

// FuzzConditionPrint checks that a condition that parses prints to text
// that parses back to the same printed form, so canonical forms are stable.
func FuzzConditionPrint(f *testing.F) {
	for _, s := range []string{
		"met > 120 GeV",
		"count(jets, et > 80 GeV and abs(eta) < 2.8) >= 2",
		"mass(jets[0], jets[1]) in 70 GeV .. 110 GeV and not dphi(jets[0], met_phi) < 0.4",
		"- -(1 - (2 - 3)) * 4 / (5 / 6) == 0",
		"((((met))))",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, src string) {
		tree, err := parseExpr(src)
		if err != nil {
			return
		}
		once := printExpr(tree)
		tree2, err := parseExpr(once)
		if err != nil {
			t.Fatalf("%q printed as %q, which fails: %v", src, once, err)
		}
		if twice := printExpr(tree2); twice != once {
			t.Fatalf("%q printed as %q, then %q", src, once, twice)
		}
	})
}
