package report

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"
)

// The report names the prescale set it applied, not the menu's active
// set: in the table's header, in report.json, and for the menu compared.
// The prescales themselves show which set was used: the starter menu's
// quiet set turns random-keep off and puts ht-400 at 2, where nominal
// leaves them at 100 and 1.
func TestReportNamesThePrescaleSetUsed(t *testing.T) {
	m, src := starter(t)
	if m.ActiveSet != "nominal" {
		t.Fatalf("the starter menu's active set is %q: the test needs another one to ask for", m.ActiveSet)
	}
	other := parseMenu(t, prescaleMenu+"prescale_sets:\n  usual: {soft-met: 7}\n  wide: {soft-met: 2, sample: off}\nactive_set: usual\n")
	rep := run(t, toySource(t, 3, 300), Options{Menu: m, MenuSource: src, PrescaleSet: "quiet", Compare: other, ComparePrescaleSet: "wide"})

	prescale := func(name string) int {
		for _, r := range rep.Rules {
			if r.Name == name {
				return r.Prescale
			}
		}
		t.Fatalf("no rule %s", name)
		return 0
	}
	if prescale("random-keep") != 0 || prescale("ht-400") != 2 || prescale("sumet-900") != 40 {
		t.Fatalf("prescales %+v: not those of the quiet set", rep.Rules)
	}
	if rep.Menu.PrescaleSet != "quiet" {
		t.Errorf("menu.prescale_set %q, want quiet", rep.Menu.PrescaleSet)
	}
	if rep.Comparison == nil {
		t.Fatal("no comparison")
	}
	if rep.Comparison.Menu.PrescaleSet != "wide" {
		t.Errorf("comparison.menu.prescale_set %q, want wide", rep.Comparison.Menu.PrescaleSet)
	}

	data, err := rep.JSON()
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Menu struct {
			PrescaleSet string `json:"prescale_set"`
		} `json:"menu"`
		Comparison struct {
			Menu struct {
				PrescaleSet string `json:"prescale_set"`
			} `json:"menu"`
		} `json:"comparison"`
	}
	if err := json.Unmarshal(data, &doc); err != nil {
		t.Fatal(err)
	}
	if doc.Menu.PrescaleSet != "quiet" || doc.Comparison.Menu.PrescaleSet != "wide" {
		t.Errorf("report.json has prescale sets %q and %q, want quiet and wide", doc.Menu.PrescaleSet, doc.Comparison.Menu.PrescaleSet)
	}

	var table bytes.Buffer
	if err := rep.WriteTable(&table); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"menu lantern-starter (hash " + rep.Menu.Hash + "), prescale set quiet\n",
		"compared with menu prescale-check (hash " + rep.Comparison.Menu.Hash + "), prescale set wide;"} {
		if !strings.Contains(table.String(), want) {
			t.Errorf("table lacks %q:\n%s", want, table.String())
		}
	}
	if strings.Contains(table.String(), "nominal") || strings.Contains(table.String(), "usual") {
		t.Errorf("table names an active set that was not applied:\n%s", table.String())
	}
}

// Without a set asked for, the report names the menu's active set.
func TestReportNamesTheActiveSetByDefault(t *testing.T) {
	m, _ := starter(t)
	rep := run(t, toySource(t, 3, 100), Options{Menu: m})
	if rep.Menu.PrescaleSet != m.ActiveSet {
		t.Errorf("menu.prescale_set %q, want the active set %q", rep.Menu.PrescaleSet, m.ActiveSet)
	}
}
