package stats

import (
	"math"
	"math/rand/v2"
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
