package stats

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
	"gonum.org/v1/gonum/stat/distuv"
)

// TurnOn returns the error-function turn-on curve
//
//	eff(x) = plateau * (1 + erf((x - x50) / (sqrt(2) sigma))) / 2,
//
// the efficiency of a sharp threshold at x50 seen through a Gaussian
// resolution of width sigma: eff(x50) = plateau/2, eff(x50 + sigma) =
// 0.841345 plateau. A sigma of zero gives the sharp step.
func TurnOn(x, x50, sigma, plateau float64) float64 {
	if sigma == 0 {
		switch {
		case x > x50:
			return plateau
		case x == x50:
			return plateau / 2
		}
		return 0
	}
	return plateau * (1 + math.Erf((x-x50)/(math.Sqrt2*math.Abs(sigma)))) / 2
}

// EffBin is one bin of an efficiency measurement: Pass of Total events at
// reference value X (the bin centre).
type EffBin struct {
	X           float64
	Pass, Total int
	// Width is the bin's full width; zero means the distance from X to
	// the nearest other centre among the bins given to FitTurnOn (empty
	// bins included), which is the width for equal bins.
	Width float64
}

// TurnOnFit is the result of FitTurnOn. Cov is the covariance matrix of
// (X50, Sigma, Plateau), in that order: the inverse of the Hessian of the
// negative log-likelihood at its minimum.
type TurnOnFit struct {
	X50, Sigma, Plateau          float64
	X50Err, SigmaErr, PlateauErr float64
	Cov                          [3][3]float64
	// Deviance is the likelihood-ratio goodness of fit against the
	// saturated model (one free efficiency per bin), about chi-square
	// distributed with NDF degrees of freedom for well-filled bins.
	Deviance float64
	NDF      int
	// PValue is the probability of a deviance at least this large if the
	// curve described the data, from the chi-square distribution with NDF
	// degrees of freedom: a small value (below 0.01, say) means the
	// error-function shape does not describe these bins, whatever the
	// errors of its parameters. Like the chi-square approximation it
	// rests on, it is rough for bins with few events: somewhat small
	// where the rise has few events per bin, large where many bins sit
	// at 0 or on the plateau (docs/report-format.md gives the figures).
	PValue float64
	// Bins is the number of bins with events.
	Bins int
	// PlateauFixed is set when the best plateau would exceed 1: it is
	// then fixed at 1, with zero error, and the fit has one more degree
	// of freedom.
	PlateauFixed bool
}

// ErrFitFailed is wrapped by FitTurnOn errors: too few filled bins, a fit
// that does not converge, a Hessian that cannot be inverted, or parameters
// that the data do not determine (an *UndeterminedError).
var ErrFitFailed = errors.New("stats: turn-on fit failed")

// Criterion names the test of FitTurnOn that refused a fit as not
// determined by the data (UndeterminedError.Criterion).
type Criterion uint8

const (
	// ErrorBeyondRange: the standard error of Param, StdErr, is not
	// finite or exceeds Limit (the fitted range, from the first to the
	// last bin centre with events, Lo to Hi, for the 50% point and the
	// width; 1 for a free plateau).
	ErrorBeyondRange Criterion = iota
	// OutsideBins: the 50% point, Value, lies outside the bins with
	// events, from the lower edge of the first, Lo, to the upper edge of
	// the last, Hi.
	OutsideBins
	// SharperThanBins: the width, Value, is below the width of the bin
	// at the 50% point, Limit, and the 50% point and the width are
	// correlated by Corr, beyond MaxStepCorrelation in magnitude.
	SharperThanBins
	// WidthWithinError: the width's standard error, StdErr, exceeds the
	// width itself, Value.
	WidthWithinError
)

// MaxStepCorrelation is the largest magnitude of the correlation of the
// 50% point and the width that FitTurnOn accepts when the width is below
// the bin width. Beyond it the likelihood is a narrow valley along which
// the two trade for each other (at 0.99 its long axis is 14 times its
// short one, sqrt((1+0.99)/(1-0.99))): the data place the step between
// two bin centres and fix neither parameter. The value is a rule of
// thumb of our own, not a published one.
const MaxStepCorrelation = 0.99

// UndeterminedError is the FitTurnOn error for a fit that converged but
// whose parameters the data do not determine, by one of the criteria
// FitTurnOn lists. It wraps ErrFitFailed; its fields let a caller restate
// the reason, for example with the unit of x. Its methods are safe for
// concurrent use.
type UndeterminedError struct {
	// Criterion is the test that failed; the meaning of the fields below
	// depends on it (see the Criterion constants).
	Criterion Criterion
	// Param names the parameter: "50% point", "width" or "plateau".
	Param string
	// Value is the parameter's fitted value (OutsideBins,
	// SharperThanBins, WidthWithinError).
	Value float64
	// StdErr is the parameter's standard error from the fit's covariance.
	StdErr float64
	// Limit is the largest error accepted (ErrorBeyondRange) or the bin
	// width (SharperThanBins).
	Limit float64
	// Corr is the correlation of the 50% point and the width
	// (SharperThanBins).
	Corr float64
	// Lo and Hi are the smallest and largest X of the bins with events
	// (ErrorBeyondRange), or the outer edges of those bins (OutsideBins).
	Lo, Hi float64
	// Unit is the unit of x, written after the numbers in the message of
	// the 50% point and the width; empty (as FitTurnOn leaves it) writes
	// none.
	Unit string
}

func (e *UndeterminedError) Error() string {
	u := ""
	if e.Unit != "" {
		u = " " + e.Unit
	}
	switch e.Criterion {
	case OutsideBins:
		side := "below"
		if e.Value > e.Hi {
			side = "above"
		}
		return fmt.Sprintf("%v: the 50%% point is not measured: the fit puts it at %.4g%s, %s the bins with events (%.4g to %.4g%s), so it is an extrapolation",
			ErrFitFailed, e.Value, u, side, e.Lo, e.Hi, u)
	case SharperThanBins:
		return fmt.Sprintf("%v: the turn-on is a step sharper than the bins: the fitted width, %.3g%s, is below the bin width of %.4g%s, and the 50%% point and the width are correlated by %.4f, so the data place the step between two bin centres but fix neither",
			ErrFitFailed, e.Value, u, e.Limit, u, e.Corr)
	case WidthWithinError:
		return fmt.Sprintf("%v: the width is not determined: its error, %.3g%s, exceeds the width itself, %.3g%s, so the data do not tell a gradual rise from a sharp step",
			ErrFitFailed, e.StdErr, u, e.Value, u)
	}
	if e.Param == "plateau" {
		return fmt.Sprintf("%v: the plateau is not determined: its error, %.2g, exceeds %g, the whole range of an efficiency", ErrFitFailed, e.StdErr, e.Limit)
	}
	return fmt.Sprintf("%v: the %s is not determined: its error, %.2g%s, exceeds the fitted range of %.4g%s (the bins with events, centred from %.4g to %.4g%s)",
		ErrFitFailed, e.Param, e.StdErr, u, e.Limit, u, e.Lo, e.Hi, u)
}

// Unwrap returns ErrFitFailed.
func (e *UndeterminedError) Unwrap() error { return ErrFitFailed }

// FitTurnOn fits TurnOn to binned efficiency data by binned maximum
// likelihood: each bin's Pass is binomial of Total with probability
// TurnOn(X), evaluated at the bin centre. The bins are in increasing X. It
// minimises the negative log-likelihood with BFGS on its analytic gradient
// from a start read off the data, then takes the covariance from the
// inverse of the Hessian, computed by central finite differences. A
// plateau above 1 is refitted fixed at 1 (PlateauFixed); a fit that fails
// at a minimum with its plateau below 1 is not. It needs at least
// four bins with events. The fit is deterministic and FitTurnOn is safe for
// concurrent use; it does not panic.
//
// A fit that converges is still refused, with an *UndeterminedError, when
// the data do not determine its parameters. The criteria, in the order
// they are tried:
//
//   - ErrorBeyondRange: the standard error of the 50% point or of the width
//     is not finite or exceeds the fitted range (the largest minus the
//     smallest X of the bins with events), or that of a free plateau
//     exceeds 1, the whole range an efficiency can take. A one-standard-
//     error interval wider than all the data means the likelihood is flat
//     wherever the data could place the parameter, and the quadratic
//     approximation that gives the error has itself broken down.
//   - OutsideBins: the 50% point lies outside the bins with events (below
//     the lower edge of the first, above the upper edge of the last). The
//     data then hold no efficiency on one side of half the plateau, and the
//     point is the curve's extrapolation, whatever its error says.
//   - SharperThanBins: the width is below the bin width and the 50% point
//     and the width are correlated beyond MaxStepCorrelation. The rise
//     then happens between two bin centres: the likelihood is flat along a
//     valley on which a later 50% point is traded for a narrower width,
//     and neither is measured. Scaling the counts up does not change
//     this; finer bins do.
//   - WidthWithinError: the width's standard error exceeds the width: the
//     data do not exclude a width of zero, a step, at one standard error.
//
// The first and the last follow the amount of information: multiplying
// every Pass and Total by c keeps the minimum and divides the covariance
// by c. The second and the third depend on where the data and the curve
// lie (a correlation does not change with c), which more events do not
// move.
func FitTurnOn(bins []EffBin) (TurnOnFit, error) {
	var used []EffBin
	for i, b := range bins {
		if b.Pass < 0 || b.Pass > b.Total {
			return TurnOnFit{}, fmt.Errorf("%w: bin at %v has %d of %d", ErrFitFailed, b.X, b.Pass, b.Total)
		}
		if b.Total > 0 {
			if b.Width == 0 {
				b.Width = nearestSpacing(bins, i)
			}
			used = append(used, b)
		}
	}
	if len(used) < 4 {
		return TurnOnFit{}, fmt.Errorf("%w: %d bins with events, need at least 4", ErrFitFailed, len(used))
	}
	x0 := startValues(used)
	out, err := fit(used, x0, false)
	if out.Plateau > 1 || (err != nil && !(out.Plateau > 0)) {
		// An efficiency cannot exceed 1. A best plateau above 1 (where the
		// likelihood, clipped at 1, also loses its curvature) means the
		// maximum lies on the boundary: the plateau is fixed there and the
		// other two parameters refitted. So is a fit that reached no
		// minimum (and left the plateau at zero). A fit that failed at a
		// minimum below 1 failed for another reason, such as a step
		// sharper than the bins, which forcing the plateau of data that
		// level off below 1 up to 1 would only hide under a curve that
		// misses them.
		fixed := append([]float64(nil), x0...)
		fixed[2] = 1
		out, err = fit(used, fixed, true)
	}
	if err != nil {
		return TurnOnFit{}, err
	}
	if err := determined(out, used); err != nil {
		return TurnOnFit{}, err
	}
	out.Bins, out.NDF = len(used), len(used)-3
	if out.PlateauFixed {
		out.NDF++
	}
	p := []float64{out.X50, out.Sigma, out.Plateau}
	out.Deviance = deviance(used, p)
	out.PValue = devianceP(out.Deviance, out.NDF)
	return out, nil
}

// fit minimises the negative log-likelihood from x0, with the plateau
// fixed at x0[2] when fixPlateau is set, and takes the covariance of the
// free parameters from the inverse Hessian.
func fit(used []EffBin, x0 []float64, fixPlateau bool) (TurnOnFit, error) {
	free := 3
	if fixPlateau {
		free = 2
	}
	full := func(q []float64) []float64 {
		if fixPlateau {
			return []float64{q[0], q[1], x0[2]}
		}
		return q
	}
	nll := func(q []float64) float64 { return negLogLikelihood(used, full(q)) }
	g3 := make([]float64, 3)
	prob := optimize.Problem{
		Func: nll,
		Grad: func(g, q []float64) {
			gradient(used, full(q), g3)
			copy(g, g3[:free])
		},
	}
	res, err := optimize.Minimize(prob, append([]float64(nil), x0[:free]...), &optimize.Settings{
		GradientThreshold: 1e-9,
		Converger:         &optimize.FunctionConverge{Absolute: 1e-12, Relative: 1e-12, Iterations: 200},
		MajorIterations:   2000,
	}, &optimize.BFGS{})
	if err != nil && res == nil {
		return TurnOnFit{}, fmt.Errorf("%w: %v", ErrFitFailed, err)
	}
	q := append([]float64(nil), res.X...)
	q[1] = math.Abs(q[1])
	span := used[len(used)-1].X - used[0].X
	if math.IsNaN(q[0]) || math.IsNaN(q[1]) || (!fixPlateau && math.IsNaN(q[2])) {
		return TurnOnFit{}, fmt.Errorf("%w: no minimum", ErrFitFailed)
	}
	if q[1] < 1e-6*span {
		return TurnOnFit{}, fmt.Errorf("%w: the turn-on is a step sharper than the bins resolve, so it has no width to fit", ErrFitFailed)
	}
	p := full(q)
	out := TurnOnFit{X50: p[0], Sigma: p[1], Plateau: p[2], PlateauFixed: fixPlateau}
	var h mat.SymDense
	fd.Hessian(&h, nll, q, &fd.Settings{Formula: fd.Central})
	var chol mat.Cholesky
	if !chol.Factorize(&h) {
		return out, fmt.Errorf("%w: the likelihood has no curvature at its minimum: a step sharper than the bins, or too few events in the rise", ErrFitFailed)
	}
	var cov mat.SymDense
	if err := chol.InverseTo(&cov); err != nil {
		return out, fmt.Errorf("%w: %v", ErrFitFailed, err)
	}
	for i := range free {
		for j := range free {
			out.Cov[i][j] = cov.At(i, j)
		}
	}
	out.X50Err, out.SigmaErr, out.PlateauErr = math.Sqrt(out.Cov[0][0]), math.Sqrt(out.Cov[1][1]), math.Sqrt(out.Cov[2][2])
	return out, nil
}

// nearestSpacing returns the distance from bin i's centre to the nearest
// other centre of bins, or 0 when there is none.
func nearestSpacing(bins []EffBin, i int) float64 {
	d := math.Inf(1)
	for j, b := range bins {
		if j != i && b.X != bins[i].X {
			d = math.Min(d, math.Abs(b.X-bins[i].X))
		}
	}
	if math.IsInf(d, 1) {
		return 0
	}
	return d
}

// determined returns an *UndeterminedError for the first criterion of
// FitTurnOn the fit fails, or nil. used are the bins with events, with
// their widths.
func determined(out TurnOnFit, used []EffBin) error {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, b := range used {
		lo, hi = math.Min(lo, b.X), math.Max(hi, b.X)
	}
	type check struct {
		param         string
		stdErr, limit float64
	}
	checks := []check{{"50% point", out.X50Err, hi - lo}, {"width", out.SigmaErr, hi - lo}}
	if !out.PlateauFixed {
		checks = append(checks, check{"plateau", out.PlateauErr, 1})
	}
	for _, c := range checks {
		// Written so that NaN fails too.
		if !(c.stdErr <= c.limit) {
			return &UndeterminedError{Criterion: ErrorBeyondRange, Param: c.param, StdErr: c.stdErr, Limit: c.limit, Lo: lo, Hi: hi}
		}
	}

	first, last := used[0], used[len(used)-1]
	loEdge, hiEdge := first.X-first.Width/2, last.X+last.Width/2
	if !(out.X50 >= loEdge && out.X50 <= hiEdge) {
		return &UndeterminedError{Criterion: OutsideBins, Param: "50% point", Value: out.X50, StdErr: out.X50Err, Lo: loEdge, Hi: hiEdge}
	}

	// The width of the bin at the 50% point: that of the nearest centre.
	width, dist := first.Width, math.Inf(1)
	for _, b := range used {
		if d := math.Abs(b.X - out.X50); d < dist {
			width, dist = b.Width, d
		}
	}
	corr := out.Cov[0][1] / math.Sqrt(out.Cov[0][0]*out.Cov[1][1])
	if out.Sigma < width && math.Abs(corr) > MaxStepCorrelation {
		return &UndeterminedError{Criterion: SharperThanBins, Param: "width", Value: out.Sigma, StdErr: out.SigmaErr, Limit: width, Corr: corr}
	}

	if !(out.SigmaErr <= out.Sigma) {
		return &UndeterminedError{Criterion: WidthWithinError, Param: "width", Value: out.Sigma, StdErr: out.SigmaErr}
	}
	return nil
}

// clampP keeps a probability away from 0 and 1 so the log-likelihood stays
// finite when the curve is flat at either end.
func clampP(p float64) (float64, bool) {
	const eps = 1e-12
	switch {
	case p < eps:
		return eps, true
	case p > 1-eps:
		return 1 - eps, true
	}
	return p, false
}

func negLogLikelihood(bins []EffBin, par []float64) float64 {
	s := 0.0
	for _, b := range bins {
		p, _ := clampP(TurnOn(b.X, par[0], par[1], par[2]))
		k, n := float64(b.Pass), float64(b.Total)
		s -= k*math.Log(p) + (n-k)*math.Log1p(-p)
	}
	return s
}

// gradient is the analytic gradient of negLogLikelihood: with z = (x -
// x50)/sigma, Phi the normal distribution and phi its density,
// dp/dx50 = -plateau phi/sigma, dp/dsigma = -plateau phi z/sigma,
// dp/dplateau = Phi.
func gradient(bins []EffBin, par, g []float64) {
	g[0], g[1], g[2] = 0, 0, 0
	x50, sigma, plateau := par[0], math.Abs(par[1]), par[2]
	sign := 1.0
	if par[1] < 0 {
		sign = -1
	}
	if sigma == 0 {
		return
	}
	for _, b := range bins {
		z := (b.X - x50) / sigma
		cdf := (1 + math.Erf(z/math.Sqrt2)) / 2
		pdf := math.Exp(-z*z/2) / math.Sqrt(2*math.Pi)
		p, clamped := clampP(plateau * cdf)
		if clamped {
			continue
		}
		k, n := float64(b.Pass), float64(b.Total)
		dl := -(k/p - (n-k)/(1-p))
		g[0] += dl * (-plateau * pdf / sigma)
		g[1] += dl * (-plateau * pdf * z / sigma) * sign
		g[2] += dl * cdf
	}
}

func startValues(bins []EffBin) []float64 {
	eff := func(b EffBin) float64 { return float64(b.Pass) / float64(b.Total) }
	// The plateau: the mean efficiency of the top quarter of bins (at
	// least one), by reference value.
	top := max(1, len(bins)/4)
	var sk, sn float64
	for _, b := range bins[len(bins)-top:] {
		sk += float64(b.Pass)
		sn += float64(b.Total)
	}
	plateau := sk / sn
	if plateau <= 0 {
		plateau = 0.5
	}
	// x50 and sigma from where the data cross 16%, 50% and 84% of the
	// plateau, interpolating between bins.
	cross := func(level float64) (float64, bool) {
		for i := 1; i < len(bins); i++ {
			a, b := eff(bins[i-1]), eff(bins[i])
			if a < level && b >= level {
				return bins[i-1].X + (level-a)/(b-a)*(bins[i].X-bins[i-1].X), true
			}
		}
		return 0, false
	}
	lo, hi := bins[0].X, bins[len(bins)-1].X
	x50, ok := cross(plateau / 2)
	if !ok {
		x50 = (lo + hi) / 2
	}
	sigma := (hi - lo) / 10
	if a, okA := cross(0.16 * plateau); okA {
		if b, okB := cross(0.84 * plateau); okB && b > a {
			sigma = (b - a) / 2
		}
	}
	if !(sigma > 0) {
		sigma = math.Max((hi-lo)/10, 1e-3)
	}
	return []float64{x50, sigma, math.Min(plateau, 1)}
}

// devianceP is the chi-square survival probability of a deviance d with
// ndf degrees of freedom.
func devianceP(d float64, ndf int) float64 {
	if ndf < 1 || math.IsNaN(d) {
		return math.NaN()
	}
	return distuv.ChiSquared{K: float64(ndf)}.Survival(math.Max(d, 0))
}

func deviance(bins []EffBin, par []float64) float64 {
	d := 0.0
	for _, b := range bins {
		p, _ := clampP(TurnOn(b.X, par[0], par[1], par[2]))
		k, n := float64(b.Pass), float64(b.Total)
		if k > 0 {
			d += 2 * k * math.Log(k/(n*p))
		}
		if n-k > 0 {
			d += 2 * (n - k) * math.Log((n-k)/(n*(1-p)))
		}
	}
	return d
}
