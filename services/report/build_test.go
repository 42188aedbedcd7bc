package report

import (
	"bytes"
	"errors"
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/services/report/stats"
)

// An efficiency whose turn-on the data do not determine (two events
// passing, both in one bin) has no fit, and its reason carries the unit of
// the reference, in report.json and in the table.
func TestUndeterminedFitIsNoFit(t *testing.T) {
	ef := effAcc{spec: EfficiencySpec{Rule: "met-120"}, ref: reference{name: "truth-met", unit: "GeV"}}
	for x := 0.0; x <= 300; x += 20 {
		ef.edges = append(ef.edges, x)
	}
	ef.total = make([]uint64, len(ef.edges)-1)
	ef.pass = make([]uint64, len(ef.edges)-1)
	copy(ef.total, []uint64{6429, 9337, 3592, 588, 52, 2})
	ef.pass[1] = 2
	a := &accumulator{opts: Options{ConfidenceLevel: 0.95}}
	out := a.efficiency(&ef)
	if out.Fit != nil {
		t.Fatalf("fitted: %+v", out.Fit)
	}
	var bins []stats.EffBin
	for _, b := range out.Bins {
		bins = append(bins, stats.EffBin{X: (b.Lo + b.Hi) / 2, Pass: int(b.Pass), Total: int(b.Total)})
	}
	if _, err := stats.FitTurnOn(bins); !errors.Is(err, stats.ErrFitFailed) {
		t.Fatalf("stats fits the same bins: %v", err)
	}
	want := "the 50% point is not determined: its error, "
	if !strings.Contains(out.FitError, want) || !strings.Contains(out.FitError, " GeV, exceeds the fitted range of 100 GeV (the bins with events, centred from 10 to 110 GeV)") {
		t.Errorf("fit_error %q", out.FitError)
	}
	var table bytes.Buffer
	if err := (&Report{Efficiencies: []Efficiency{out}}).WriteTable(&table); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(table.String(), "efficiency of met-120 vs truth-met: no fit (stats: turn-on fit failed: "+want) {
		t.Errorf("table:\n%s", table.String())
	}
}
