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
	// With the plateau fixed, two parameters are fitted.
	if !fit.PlateauFixed || fit.NDF != fit.Bins-2 {
		t.Errorf("plateau fixed %v: %d degrees of freedom for %d bins, want fixed and bins - 2", fit.PlateauFixed, fit.NDF, fit.Bins)
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
	bins := []EffBin{{X: 10, Pass: 0, Total: 6429}, {X: 30, Pass: 2, Total: 9337}, {X: 50, Pass: 0, Total: 3592}, {X: 70, Pass: 0, Total: 588}, {X: 90, Pass: 0, Total: 52}, {X: 110, Pass: 0, Total: 2}}
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
// memory). The fitted values stay where they are.
func TestFitTurnOnBoundary(t *testing.T) {
	// A slow rise onto a plateau near 0.5, from one in eight to three in
	// eight: five times these counts give a width just above its error,
	// four times just below.
	bins := []EffBin{{X: 10, Pass: 1, Total: 8}, {X: 30, Pass: 1, Total: 8}, {X: 50, Pass: 2, Total: 8}, {X: 70, Pass: 3, Total: 8}, {X: 90, Pass: 3, Total: 8}}
	fit, err := FitTurnOn(widen(bins, 5))
	if err != nil {
		t.Fatalf("5 times: %v", err)
	}
	if r := fit.SigmaErr / fit.Sigma; !(r > 0.85 && r <= 1) {
		t.Errorf("5 times: width %v +- %v, want the error just inside the width", fit.Sigma, fit.SigmaErr)
	}

	_, err = FitTurnOn(widen(bins, 4))
	var u *UndeterminedError
	if !errors.As(err, &u) || !errors.Is(err, ErrFitFailed) {
		t.Fatalf("4 times: err %v, want undetermined", err)
	}
	if u.Criterion != WidthWithinError || u.Param != "width" || !(u.StdErr > u.Value && u.StdErr < 1.15*u.Value) {
		t.Errorf("4 times: %+v, want the width's error just above the width", u)
	}
	near(t, "width, 4 and 5 times the events", u.Value, fit.Sigma, 1e-4*fit.Sigma)
	near(t, "error ratio 4 to 5 times the events", u.StdErr/fit.SigmaErr, math.Sqrt(5.0/4), 1e-3)
}

// binsFrom makes equal bins of width w from lo, each {pass, total}.
func binsFrom(lo, w float64, counts [][2]int) []EffBin {
	var bins []EffBin
	for i, c := range counts {
		bins = append(bins, EffBin{X: lo + w*(float64(i)+0.5), Pass: c[0], Total: c[1], Width: w})
	}
	return bins
}

// zmumuMuon20 are the counts of a 20 GeV muon rule against the true muon
// pT, in 4 GeV bins from 0 to 80, in 2000 crossings forced to hold a Z
// decaying to two muons: none of 54 pass in [16, 20) and 52 of 67 in
// [20, 24). The rule's cut on the measured pT is a step that the muon
// resolution does not smear over a bin.
var zmumuMuon20 = [][2]int{{0, 5}, {0, 13}, {0, 44}, {0, 52}, {0, 54}, {52, 67}, {101, 118}, {116, 122}, {149, 166}, {193, 219},
	{306, 350}, {429, 524}, {158, 195}, {50, 57}, {11, 13}, {1, 1}, {0, 0}, {0, 0}, {0, 0}, {0, 0}}

// A step sharper than the bins is no fit. The earlier rule fitted these
// counts with a 50% point of 21.4 +- 15 GeV and a width of 0.475 +- 12
// GeV, correlated by -0.9999: both errors within the fitted range, yet
// the likelihood is flat along a valley on which the width can be
// anything from almost zero to one bin's worth while the 50% point moves
// to keep the curve's value at the bin centres. Shown here by walking that
// valley: every point of it shown lies within half a unit of -ln L of the
// earlier best fit, inside the one-standard-deviation region of the
// likelihood ratio (-ln L within 1/2 of its minimum: F. James,
// Statistical Methods in Experimental Physics, 2nd ed. (2006), chapter
// 9, from memory).
func TestFitTurnOnStepSharperThanBins(t *testing.T) {
	bins := binsFrom(0, 4, zmumuMuon20)
	var used []EffBin
	for _, b := range bins {
		if b.Total > 0 {
			used = append(used, b)
		}
	}
	const x50, sigma, plateau = 21.378071, 0.474997, 0.857790 // the earlier fit
	best := negLogLikelihood(used, []float64{x50, sigma, plateau})
	z := (22 - x50) / sigma // the curve's argument at the centre above the step
	for _, s := range []float64{0.05, 0.2, 0.8} {
		if d := negLogLikelihood(used, []float64{22 - z*s, s, plateau}) - best; !(math.Abs(d) < 0.5) {
			t.Errorf("width %v along the valley: -ln L differs by %v from the earlier fit", s, d)
		}
	}

	spaced := binsFrom(0, 4, zmumuMuon20)
	for i := range spaced {
		spaced[i].Width = 0 // taken from the spacing of the centres
	}
	for _, given := range []struct {
		name string
		bins []EffBin
	}{{"bin widths given", bins}, {"bin widths from the spacing", spaced}} {
		fit, err := FitTurnOn(given.bins)
		var u *UndeterminedError
		if !errors.As(err, &u) || !errors.Is(err, ErrFitFailed) {
			t.Fatalf("%s: fitted %+v (err %v), want a step sharper than the bins", given.name, fit, err)
		}
		if u.Criterion != SharperThanBins || u.Param != "width" || u.Limit != 4 || !(u.Value < 4) || !(math.Abs(u.Corr) > MaxStepCorrelation) {
			t.Errorf("%s: %+v", given.name, u)
		}
		if want := "the turn-on is a step sharper than the bins: the fitted width, "; !strings.Contains(u.Error(), want) {
			t.Errorf("%s: %q lacks %q", given.name, u, want)
		}
		u.Unit = "GeV"
		if want := "is below the bin width of 4 GeV"; !strings.Contains(u.Error(), want) {
			t.Errorf("%q lacks %q", u, want)
		}
	}

	// The same sample's dimuon rule rises slowly over many bins: a fit
	// the data determine, which stays fitted.
	dimu := binsFrom(0, 4, [][2]int{{0, 5}, {0, 13}, {2, 44}, {5, 52}, {20, 54}, {23, 67}, {51, 118}, {74, 122}, {88, 166}, {128, 219},
		{233, 350}, {381, 524}, {147, 195}, {45, 57}, {11, 13}, {1, 1}, {0, 0}, {0, 0}, {0, 0}, {0, 0}})
	fit, err := FitTurnOn(dimu)
	if err != nil {
		t.Fatalf("dimuon rule: %v", err)
	}
	if math.Abs(fit.X50-25.0) > 0.1 || math.Abs(fit.X50Err-1.57) > 0.05 || math.Abs(fit.Sigma-14.26) > 0.1 || math.Abs(fit.SigmaErr-2.21) > 0.05 {
		t.Errorf("dimuon rule: %+v, want 25.0 +- 1.57 and 14.26 +- 2.21 as before", fit)
	}
}

// emberPairMET100 are the counts of a 100 GeV MET rule against the true
// MET in 20 GeV bins from 0 to 400, in 40 crossings forced to hold a pair
// of invisible particles: nine filled bins from 80 GeV up, all passing
// but one event of two at 140.
var emberPairMET100 = [][2]int{{0, 0}, {0, 0}, {0, 0}, {0, 0}, {1, 1}, {0, 0}, {1, 1}, {1, 2}, {0, 0}, {0, 0},
	{1, 1}, {1, 1}, {1, 1}, {0, 0}, {0, 0}, {0, 0}, {1, 1}, {1, 1}, {1, 1}, {0, 0}}

// A 50% point outside the bins with events is an extrapolation, not a
// measurement: the earlier rule reported 20.3 +- 197 GeV, width 130 +-
// 167 GeV, for data that start at 80 GeV, all but one event passing.
func TestFitTurnOnMidpointOutsideTheBins(t *testing.T) {
	fit, err := FitTurnOn(binsFrom(0, 20, emberPairMET100))
	var u *UndeterminedError
	if !errors.As(err, &u) || !errors.Is(err, ErrFitFailed) {
		t.Fatalf("fitted %+v (err %v), want the 50%% point outside the bins", fit, err)
	}
	if u.Criterion != OutsideBins || u.Param != "50% point" || u.Lo != 80 || u.Hi != 380 || !(u.Value < 80) {
		t.Errorf("%+v", u)
	}
	u.Unit = "GeV"
	if want := "the 50% point is not measured: the fit puts it at "; !strings.Contains(u.Error(), want) || !strings.Contains(u.Error(), " GeV, below the bins with events (80 to 380 GeV)") {
		t.Errorf("%q", u)
	}
}

// A turn-on the data determine stays fitted: the same rule on 3000
// crossings of the same process, whose fit (the plateau at its limit)
// gave x50 = 101.6 +- 2.7 GeV and sigma = 22.0 +- 2.4 GeV before the
// criteria were tightened.
func TestFitTurnOnWellDeterminedStaysFitted(t *testing.T) {
	bins := binsFrom(0, 20, [][2]int{{0, 5}, {0, 15}, {0, 28}, {3, 33}, {8, 31}, {26, 37}, {34, 38}, {40, 41}, {37, 37}, {44, 44},
		{45, 45}, {43, 43}, {59, 59}, {50, 50}, {53, 53}, {52, 52}, {63, 63}, {65, 65}, {57, 57}, {73, 73}})
	fit, err := FitTurnOn(bins)
	if err != nil {
		t.Fatal(err)
	}
	if !fit.PlateauFixed || math.Abs(fit.X50-101.6) > 0.05 || math.Abs(fit.X50Err-2.67) > 0.05 || math.Abs(fit.Sigma-22.0) > 0.05 || math.Abs(fit.SigmaErr-2.41) > 0.05 {
		t.Errorf("%+v, want x50 101.6 +- 2.67, sigma 22.0 +- 2.41, plateau fixed", fit)
	}
}

// A step whose plateau is below 1 is not forced onto a plateau of 1: the
// free fit fails at its minimum (no curvature), and a curve with its
// plateau fixed at 1 would only pass far from the data (the earlier rule
// reported such a curve, 50% point 129 GeV for a step at 121).
func TestFitTurnOnStepBelowFullPlateau(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	bins := syntheticTurnOn(r, 121, 0.5, 0.95, 2000)
	if fit, err := FitTurnOn(bins); !errors.Is(err, ErrFitFailed) {
		t.Errorf("fitted %+v", fit)
	}
}

// Each criterion on its own, just inside and just outside, on fits made
// up for it over three bins of width 20 centred at 10, 30 and 50 (the
// fitted range 40, the bins' edges 0 and 60). A non-finite error fails,
// and a fixed plateau is not judged by its (zero) error.
func TestDeterminedCriteria(t *testing.T) {
	bins := binsFrom(0, 20, [][2]int{{0, 1}, {1, 2}, {1, 1}})
	mk := func(x50, x50Err, sigma, sigmaErr, corr float64) TurnOnFit {
		f := TurnOnFit{X50: x50, X50Err: x50Err, Sigma: sigma, SigmaErr: sigmaErr, Plateau: 0.9, PlateauErr: 0.1}
		f.Cov[0][0], f.Cov[1][1], f.Cov[2][2] = x50Err*x50Err, sigmaErr*sigmaErr, 0.01
		f.Cov[0][1] = corr * x50Err * sigmaErr
		f.Cov[1][0] = f.Cov[0][1]
		return f
	}
	fixed := mk(30, 40, 45, 40, 0)
	fixed.PlateauFixed, fixed.PlateauErr = true, 0
	wide := mk(30, 5, 10, 5, 0)
	wide.PlateauErr = 1.01
	for _, c := range []struct {
		name      string
		fit       TurnOnFit
		criterion Criterion
		param     string // "" when the fit is determined
	}{
		{"good", mk(30, 5, 10, 5, 0.5), 0, ""},
		{"50% point error NaN", mk(30, math.NaN(), 10, 5, 0), ErrorBeyondRange, "50% point"},
		{"50% point error the range", mk(30, 40, 45, 5, 0), 0, ""},
		{"50% point error beyond the range", mk(30, 40.01, 45, 5, 0), ErrorBeyondRange, "50% point"},
		{"width error infinite", mk(30, 5, 10, math.Inf(1), 0), ErrorBeyondRange, "width"},
		{"width error beyond the range", mk(30, 5, 50, 40.01, 0), ErrorBeyondRange, "width"},
		{"plateau error beyond 1", wide, ErrorBeyondRange, "plateau"},
		{"plateau fixed", fixed, 0, ""},
		{"50% point at the lower edge", mk(0, 5, 10, 5, 0), 0, ""},
		{"50% point below the lower edge", mk(-0.01, 5, 10, 5, 0), OutsideBins, "50% point"},
		{"50% point at the upper edge", mk(60, 5, 10, 5, 0), 0, ""},
		{"50% point above the upper edge", mk(60.01, 5, 10, 5, 0), OutsideBins, "50% point"},
		{"50% point NaN", mk(math.NaN(), 5, 10, 5, 0), OutsideBins, "50% point"},
		{"narrow, correlated", mk(30, 5, 19.9, 5, -0.991), SharperThanBins, "width"},
		{"narrow, correlated at the limit", mk(30, 5, 19.9, 5, -0.99), 0, ""},
		{"a bin wide, correlated", mk(30, 5, 20, 5, 0.999), 0, ""},
		{"width error the width", mk(30, 5, 10, 10, 0), 0, ""},
		{"width error above the width", mk(30, 5, 10, 10.01, 0), WidthWithinError, "width"},
	} {
		err := determined(c.fit, bins)
		var u *UndeterminedError
		switch {
		case c.param == "" && err != nil:
			t.Errorf("%s: %v", c.name, err)
		case c.param != "" && (!errors.As(err, &u) || u.Criterion != c.criterion || u.Param != c.param):
			t.Errorf("%s: %v, want criterion %d on the %s", c.name, err, c.criterion, c.param)
		}
	}
	u := &UndeterminedError{Param: "plateau", StdErr: 1.5, Limit: 1, Unit: "GeV"}
	if want := "stats: turn-on fit failed: the plateau is not determined: its error, 1.5, exceeds 1, the whole range of an efficiency"; u.Error() != want {
		t.Errorf("%q, want %q", u, want)
	}
	u = &UndeterminedError{Criterion: WidthWithinError, Param: "width", Value: 130, StdErr: 167, Unit: "GeV"}
	if want := "stats: turn-on fit failed: the width is not determined: its error, 167 GeV, exceeds the width itself, 130 GeV, so the data do not tell a gradual rise from a sharp step"; u.Error() != want {
		t.Errorf("%q, want %q", u, want)
	}
}

// The p-value of the deviance is the chi-square upper tail: at the
// tabulated upper critical values it gives their tail probability
// (NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4,
// upper critical values of the chi-square distribution; values from
// memory, to the table's three decimals).
func TestDevianceP(t *testing.T) {
	for _, c := range []struct {
		x    float64
		ndf  int
		tail float64
	}{
		{3.841, 1, 0.05}, {11.070, 5, 0.05}, {18.307, 10, 0.05}, {23.209, 10, 0.01}, {43.773, 30, 0.05}, {67.505, 50, 0.05},
	} {
		near(t, "tail", devianceP(c.x, c.ndf), c.tail, 2e-4)
	}
	if !math.IsNaN(devianceP(3, 0)) {
		t.Error("a p-value without degrees of freedom")
	}
}

// Fits of samples drawn from the curve itself give p-values spread
// evenly over (0, 1) where every bin expects several passing and failing
// events; with bins far below the turn-on or on the plateau (nearly all
// fail or all pass, so their deviance is nearly 0 while they count as
// degrees of freedom) the p-values lean high, so a poor fit is flagged
// less often, never more. A two-step efficiency, which no single error
// function describes, gets a p-value that says so.
func TestFitTurnOnPValue(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 5))
	const trials = 200
	var low, high, lowAll int
	for range trials {
		var core []EffBin
		for _, b := range syntheticTurnOn(r, 120, 15, 0.95, 200) {
			if b.X > 95 && b.X < 155 { // expected efficiency 0.05 - 0.93
				core = append(core, b)
			}
		}
		f, err := FitTurnOn(core)
		if err != nil {
			t.Fatal(err)
		}
		if f.PValue < 0.05 {
			low++
		}
		if f.PValue > 0.5 {
			high++
		}
		all, err := FitTurnOn(syntheticTurnOn(r, 120, 15, 0.95, 200))
		if err != nil {
			t.Fatal(err)
		}
		if all.PValue < 0.05 {
			lowAll++
		}
	}
	t.Logf("core bins: %d of %d below 0.05, %d above 0.5; all bins: %d below 0.05", low, trials, high, lowAll)
	// The mean deviance of the core fits is the number of degrees of
	// freedom, as the chi-square's mean: within 0.5 over 1,000 fits
	// (standard error sqrt(2 NDF / 1000) = 0.13 for 9), which a count off
	// by one would miss by 7 standard errors.
	var sum float64
	ndf := 0
	const many = 1000
	for range many {
		var core []EffBin
		for _, b := range syntheticTurnOn(r, 120, 15, 0.95, 200) {
			if b.X > 95 && b.X < 155 {
				core = append(core, b)
			}
		}
		f, err := FitTurnOn(core)
		if err != nil {
			t.Fatal(err)
		}
		sum += f.Deviance
		ndf = f.NDF
	}
	if mean := sum / many; math.Abs(mean-float64(ndf)) > 0.5 {
		t.Errorf("mean deviance %.2f over %d fits, for %d degrees of freedom", mean, many, ndf)
	}
	// The binomial spread of 200 trials: 1.5% at 5%, 3.5% at 50%.
	if frac := float64(low) / trials; frac < 0.01 || frac > 0.10 {
		t.Errorf("%.1f%% of fits of the true curve have p < 0.05, want about 5%%", 100*frac)
	}
	if frac := float64(high) / trials; frac < 0.40 || frac > 0.60 {
		t.Errorf("%.1f%% of fits of the true curve have p > 0.5, want about half", 100*frac)
	}
	if frac := float64(lowAll) / trials; frac > 0.10 {
		t.Errorf("with the tails, %.1f%% of fits of the true curve have p < 0.05, want at most about 5%%", 100*frac)
	}

	var bins []EffBin
	for x := 2.5; x < 250; x += 5 {
		p := 0.0
		switch {
		case x > 150:
			p = 1
		case x > 80:
			p = 0.5
		}
		k := 0
		for range 4000 {
			if r.Float64() < p {
				k++
			}
		}
		bins = append(bins, EffBin{X: x, Pass: k, Total: 4000})
	}
	f, err := FitTurnOn(bins)
	if err != nil {
		t.Fatalf("two steps: %v", err)
	}
	if !(f.PValue < 1e-6) {
		t.Errorf("two steps fitted with one error function: deviance %.1f for %d, p = %g; want it flagged", f.Deviance, f.NDF, f.PValue)
	}
}
