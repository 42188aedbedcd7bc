package stats

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// The curve at one and two widths above the 50% point: the Gaussian
// integrals 0.841345 and 0.977250 of the smeared step (T.R. Pollmann,
// EPJC (2019), arXiv:1901.10767, for the form of the turn-on).
func TestTurnOnShape(t *testing.T) {
	const x50, sigma, plateau = 100.0, 12.0, 0.9
	near(t, "eff(x50)", TurnOn(x50, x50, sigma, plateau), plateau/2, 1e-15)
	near(t, "eff(x50+sigma)", TurnOn(x50+sigma, x50, sigma, plateau), 0.841345*plateau, 1e-6)
	near(t, "eff(x50+2sigma)", TurnOn(x50+2*sigma, x50, sigma, plateau), 0.977250*plateau, 1e-6)
	near(t, "eff(x50-sigma)", TurnOn(x50-sigma, x50, sigma, plateau), (1-0.841345)*plateau, 1e-6)
	if TurnOn(99, 100, 0, 1) != 0 || TurnOn(101, 100, 0, 1) != 1 {
		t.Error("sigma 0 is not the sharp step")
	}
}

// syntheticTurnOn draws, at every bin centre, perBin trials that pass
// with probability TurnOn(x).
func syntheticTurnOn(r *rand.Rand, x50, sigma, plateau float64, perBin int) []EffBin {
	var bins []EffBin
	for x := 2.5; x < 250; x += 5 {
		p := TurnOn(x, x50, sigma, plateau)
		k := 0
		for range perBin {
			if r.Float64() < p {
				k++
			}
		}
		bins = append(bins, EffBin{X: x, Pass: k, Total: perBin})
	}
	return bins
}

// The fit recovers a known 50% point, width and plateau from a synthetic
// sample within its errors: in one large sample, and as coverage over
// many small ones (about 68% of fits within one error).
func TestFitTurnOnRecoversTruth(t *testing.T) {
	const x50, sigma, plateau = 120.0, 15.0, 0.95
	r := rand.New(rand.NewPCG(7, 11))
	fit, err := FitTurnOn(syntheticTurnOn(r, x50, sigma, plateau, 4000))
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name            string
		got, err, truth float64
		maxErr          float64
	}{
		{"x50", fit.X50, fit.X50Err, x50, 0.5},
		{"sigma", fit.Sigma, fit.SigmaErr, sigma, 0.5},
		{"plateau", fit.Plateau, fit.PlateauErr, plateau, 0.005},
	} {
		if !(c.err > 0 && c.err < c.maxErr) {
			t.Errorf("%s error %v, want in (0, %v)", c.name, c.err, c.maxErr)
		}
		if math.Abs(c.got-c.truth) > 3*c.err {
			t.Errorf("%s = %v +- %v, truth %v: off by more than 3 errors", c.name, c.got, c.err, c.truth)
		}
	}
	if fit.NDF != fit.Bins-3 || fit.Bins != 50 {
		t.Errorf("bins %d ndf %d", fit.Bins, fit.NDF)
	}
	// The deviance of a correct model is about chi-square with NDF degrees
	// of freedom: well inside 3 standard deviations sqrt(2 NDF).
	if d := math.Abs(fit.Deviance - float64(fit.NDF)); d > 3*math.Sqrt(2*float64(fit.NDF)) {
		t.Errorf("deviance %v for %d degrees of freedom", fit.Deviance, fit.NDF)
	}

	const trials = 200
	within := [3]int{}
	for range trials {
		f, err := FitTurnOn(syntheticTurnOn(r, x50, sigma, plateau, 60))
		if err != nil {
			t.Fatal(err)
		}
		for i, c := range [][3]float64{{f.X50, f.X50Err, x50}, {f.Sigma, f.SigmaErr, sigma}, {f.Plateau, f.PlateauErr, plateau}} {
			if math.Abs(c[0]-c[2]) <= c[1] {
				within[i]++
			}
		}
	}
	for i, name := range []string{"x50", "sigma", "plateau"} {
		// 68.3% expected; the binomial spread of 200 trials is 3.3%.
		if frac := float64(within[i]) / trials; frac < 0.58 || frac > 0.78 {
			t.Errorf("%s within one error in %.0f%% of fits, want about 68%%", name, 100*frac)
		}
	}
}

func TestFitTurnOnRejectsBadInput(t *testing.T) {
	if _, err := FitTurnOn([]EffBin{{X: 1, Pass: 1, Total: 2}, {X: 2, Pass: 1, Total: 2}}); err == nil {
		t.Error("two bins fitted")
	}
	if _, err := FitTurnOn([]EffBin{{X: 1, Pass: 3, Total: 2}}); err == nil {
		t.Error("pass > total accepted")
	}
}

// A full plateau (efficiency 1 on top) is fitted with the plateau at its
// limit and still recovers the 50% point and the width.
func TestFitTurnOnFullPlateau(t *testing.T) {
	const x50, sigma = 80.0, 9.0
	r := rand.New(rand.NewPCG(3, 5))
	fit, err := FitTurnOn(syntheticTurnOn(r, x50, sigma, 1, 3000))
	if err != nil {
		t.Fatal(err)
	}
	if fit.Plateau > 1 || fit.Plateau < 0.999 {
		t.Errorf("plateau %v", fit.Plateau)
	}
	if math.Abs(fit.X50-x50) > 3*fit.X50Err || math.Abs(fit.Sigma-sigma) > 3*fit.SigmaErr || !(fit.X50Err > 0 && fit.X50Err < 0.5) {
		t.Errorf("fit %+v", fit)
	}
}

// widen multiplies every Pass and Total by c: the same efficiencies with c
// times the events.
func widen(bins []EffBin, c int) []EffBin {
	out := make([]EffBin, len(bins))
	for i, b := range bins {
		out[i] = EffBin{X: b.X, Pass: c * b.Pass, Total: c * b.Total}
	}
	return out
}

// Two events passing, both in the 20-40 bin, of some twenty thousand: the
// counts of a 20000-crossing pile-up sample against truth MET in 20 GeV
// bins from 0 to 300. The likelihood is almost flat, and the Hessian gives
// errors of 1e5 on a fit that means nothing: it must be refused with the
// reason.
func TestFitTurnOnTwoPassingEventsIsUndetermined(t *testing.T) {
	bins := []EffBin{{10, 0, 6429}, {30, 2, 9337}, {50, 0, 3592}, {70, 0, 588}, {90, 0, 52}, {110, 0, 2}}
	for x := 130.0; x < 300; x += 20 {
		bins = append(bins, EffBin{X: x})
	}
	fit, err := FitTurnOn(bins)
	if !errors.Is(err, ErrFitFailed) {
		t.Fatalf("fitted: %+v, err %v", fit, err)
	}
	var u *UndeterminedError
	if !errors.As(err, &u) {
		t.Fatalf("%v is not an *UndeterminedError", err)
	}
	if u.Param != "50% point" || u.Lo != 10 || u.Hi != 110 || u.Limit != 100 || !(u.StdErr > 1e3) {
		t.Errorf("%+v", u)
	}
	for _, want := range []string{"stats: turn-on fit failed: the 50% point is not determined: its error, ", ", exceeds the fitted range of 100 (the bins with events, centred from 10 to 110)"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("%q lacks %q", err, want)
		}
	}
	u.Unit = "GeV"
	if want := "exceeds the fitted range of 100 GeV (the bins with events, centred from 10 to 110 GeV)"; !strings.Contains(u.Error(), want) || !strings.Contains(u.Error(), " GeV, exceeds") {
		t.Errorf("%q lacks the unit", u)
	}
}

// Just inside the criterion the fit is made; with a fifth fewer events it
// is just outside and refused. The errors between the two follow the
// growth of the Fisher information with the sample: multiplying every
// count by c multiplies the log-likelihood by c, so the covariance falls as
// 1/c and the errors as 1/sqrt(c) (the information of independent trials
// adds up; the inverse Hessian as the covariance of maximum-likelihood
// estimators: G. Cowan, Statistical Data Analysis (1998), chapter 6, from
// memory).
func TestFitTurnOnBoundary(t *testing.T) {
	for _, c := range []struct {
		name  string
		param string
		bins  []EffBin
	}{
		// The foot of a turn-on whose 50% point lies beyond the data: one
		// in six above the first bin, plateau at the limit.
		{"foot", "50% point", []EffBin{{10, 0, 6}, {30, 1, 6}, {50, 1, 6}, {70, 1, 6}, {90, 1, 6}}},
		// A rise from the third bin on, which the fit takes for a step at
		// 51 onto a plateau of 0.64: the 50% point is found, the width
		// only just.
		{"sharp rise", "width", []EffBin{{10, 0, 7}, {30, 0, 7}, {50, 2, 7}, {70, 4, 7}, {90, 5, 7}}},
	} {
		const span = 80
		fit, err := FitTurnOn(widen(c.bins, 5))
		if err != nil {
			t.Fatalf("%s, 5 times: %v", c.name, err)
		}
		in := fit.X50Err
		if c.param == "width" {
			in = fit.SigmaErr
		}
		if !(in > 0.9*span && in <= span) {
			t.Errorf("%s, 5 times: %s error %v, want just inside %v", c.name, c.param, in, span)
		}

		_, err = FitTurnOn(widen(c.bins, 4))
		var u *UndeterminedError
		if !errors.As(err, &u) || !errors.Is(err, ErrFitFailed) {
			t.Fatalf("%s, 4 times: err %v, want undetermined", c.name, err)
		}
		if u.Param != c.param || u.Limit != span || !(u.StdErr > span && u.StdErr < 1.2*span) {
			t.Errorf("%s, 4 times: %+v, want the %s just outside", c.name, u, c.param)
		}
		near(t, c.name+": error ratio 4 to 5 times the events", u.StdErr/in, math.Sqrt(5.0/4), 1e-3)
	}
}

// A non-finite error fails the criterion, and a fixed plateau is not
// judged by its (zero) error.
func TestDeterminedEdgeCases(t *testing.T) {
	bins := []EffBin{{X: 10}, {X: 50}}
	for _, c := range []struct {
		fit   TurnOnFit
		param string
	}{
		{TurnOnFit{X50Err: math.NaN(), SigmaErr: 1, PlateauErr: 0.1}, "50% point"},
		{TurnOnFit{X50Err: 1, SigmaErr: math.Inf(1), PlateauErr: 0.1}, "width"},
		{TurnOnFit{X50Err: 40, SigmaErr: 40, PlateauErr: 1.5}, "plateau"},
		{TurnOnFit{X50Err: 40, SigmaErr: 40, PlateauFixed: true}, ""},
	} {
		err := determined(c.fit, bins)
		var u *UndeterminedError
		switch {
		case c.param == "" && err != nil:
			t.Errorf("%+v: %v", c.fit, err)
		case c.param != "" && (!errors.As(err, &u) || u.Param != c.param):
			t.Errorf("%+v: %v, want the %s undetermined", c.fit, err, c.param)
		}
	}
	u := &UndeterminedError{Param: "plateau", StdErr: 1.5, Limit: 1, Unit: "GeV"}
	if want := "stats: turn-on fit failed: the plateau is not determined: its error, 1.5, exceeds 1, the whole range of an efficiency"; u.Error() != want {
		t.Errorf("%q, want %q", u, want)
	}
}
