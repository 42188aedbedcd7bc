package report

import (
	"bytes"
	"strings"
	"testing"
)

// The table's fit line gives the width in the reference's unit, as the
// 50% point; a count reference has no unit and gets none.
func TestTableFitUnits(t *testing.T) {
	fit := &ErfFit{X50: 101.6, X50Err: 2.7, Sigma: 22.0, SigmaErr: 2.4, Plateau: 1, PlateauFixed: true, Deviance: 12.3, NDF: 18}
	rep := &Report{Efficiencies: []Efficiency{
		{Rule: "met-100", Reference: "truth-met", Unit: "GeV", Fit: fit},
		{Rule: "three-jets", Reference: "count(jets)", Fit: fit},
	}}
	var b bytes.Buffer
	if err := rep.WriteTable(&b); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		"efficiency of met-100 vs truth-met: 50% point 101.6 ± 2.7 GeV, width 22 ± 2.4 GeV, plateau 1 (fixed at the limit)",
		"efficiency of three-jets vs count(jets): 50% point 101.6 ± 2.7, width 22 ± 2.4, plateau 1",
	} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("table lacks %q:\n%s", want, b.String())
		}
	}
}

// The fit line gives the deviance's p-value, and below 1% says that the
// curve does not describe the bins; a fit without a p-value shows none.
func TestTableFitQuality(t *testing.T) {
	good, poor := 0.31, 0.0004
	rep := &Report{Efficiencies: []Efficiency{
		{Rule: "good", Reference: "met", Unit: "GeV", Fit: &ErfFit{X50: 100, Sigma: 10, Plateau: 1, Deviance: 20.1, NDF: 18, PValue: &good}},
		{Rule: "poor", Reference: "met", Unit: "GeV", Fit: &ErfFit{X50: 100, Sigma: 10, Plateau: 1, Deviance: 61.0, NDF: 18, PValue: &poor}},
		{Rule: "none", Reference: "met", Unit: "GeV", Fit: &ErfFit{X50: 100, Sigma: 10, Plateau: 1, Deviance: 1, NDF: 0}},
	}}
	var b bytes.Buffer
	if err := rep.WriteTable(&b); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		"(deviance 20.1 for 18 degrees of freedom, p = 0.31)\n",
		"(deviance 61.0 for 18 degrees of freedom, p = 0.0004: POOR FIT, the curve does not describe these bins; read the bins, not the parameters)\n",
		"(deviance 1.0 for 0 degrees of freedom)\n",
	} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("table lacks %q:\n%s", want, b.String())
		}
	}
}

// The passed column counts events that passed a rule before prescale.
// The menu's total is of events kept, which is another count: the total
// row leaves the passed cell empty and gives the kept rate only.
func TestTableTotalRowPassedCell(t *testing.T) {
	rep := &Report{
		Rules: []RuleRates{
			{Name: "met-120", Prescale: 1, Before: Rate{Events: 40, RateHz: 4000}, After: Rate{Events: 40, RateHz: 4000}},
			{Name: "sumet-900", Prescale: 10, Before: Rate{Events: 500, RateHz: 50000}, After: Rate{Events: 50, RateHz: 5000}},
		},
		Total: Rate{Events: 85, RateHz: 8500},
	}
	var b bytes.Buffer
	if err := rep.WriteTable(&b); err != nil {
		t.Fatal(err)
	}
	var header, total string
	for _, line := range strings.Split(b.String(), "\n") {
		switch {
		case strings.HasPrefix(line, "rule "):
			header = line
		case strings.HasPrefix(line, "total "):
			total = line
		}
	}
	if header == "" || total == "" {
		t.Fatalf("no header or total row:\n%s", b.String())
	}
	// The cells line up under the header: the passed cell of the total
	// row, from the passed column to the before-prescale one, is blank.
	from, to := strings.Index(header, "passed"), strings.Index(header, "before prescale")
	if len(total) < to || strings.TrimSpace(total[from:to]) != "" {
		t.Errorf("total row %q has %q under passed", total, total[from:min(to, len(total))])
	}
	if !strings.Contains(total, "8.5k ± 0") {
		t.Errorf("total row %q lacks the kept rate", total)
	}
}
