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
	if !strings.Contains(table.String(), "efficiency of met-120 vs truth-met: no fit ("+want) {
		t.Errorf("table:\n%s", table.String())
	}
	// The reason is for the reader: without the Go error's package prefix
	// and the sentinel's text, which "no fit" already says.
	if !strings.HasPrefix(out.FitError, want) || strings.Contains(out.FitError, "stats:") || strings.Contains(table.String(), "stats:") {
		t.Errorf("fit_error %q, table:\n%s", out.FitError, table.String())
	}
}

// A step sharper than the bins, as a 20 GeV muon rule gives against the
// true muon pT in 4 GeV bins (none of 54 passing in [16, 20), 52 of 67 in
// [20, 24)), has no fit in the report, and the reason says so in the
// reference's unit.
func TestStepSharperThanBinsIsNoFit(t *testing.T) {
	ef := effAcc{spec: EfficiencySpec{Rule: "mu-20"}, ref: reference{name: "truth-muon-pt", unit: "GeV"}}
	for x := 0.0; x <= 80; x += 4 {
		ef.edges = append(ef.edges, x)
	}
	ef.total = []uint64{5, 13, 44, 52, 54, 67, 118, 122, 166, 219, 350, 524, 195, 57, 13, 1, 0, 0, 0, 0}
	ef.pass = []uint64{0, 0, 0, 0, 0, 52, 101, 116, 149, 193, 306, 429, 158, 50, 11, 1, 0, 0, 0, 0}
	a := &accumulator{opts: Options{ConfidenceLevel: 0.95}}
	out := a.efficiency(&ef)
	if out.Fit != nil {
		t.Fatalf("fitted: %+v", out.Fit)
	}
	if want := "the turn-on is a step sharper than the bins: the fitted width, "; !strings.HasPrefix(out.FitError, want) || !strings.Contains(out.FitError, " GeV, is below the bin width of 4 GeV") {
		t.Errorf("fit_error %q", out.FitError)
	}
}
