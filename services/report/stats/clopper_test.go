package stats

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol {
		t.Errorf("%s = %.10g, want %.10g (+-%g)", what, got, want, tol)
	}
}

// The worked values of the Clopper-Pearson interval (C.J. Clopper, E.S.
// Pearson, Biometrika 26 (1934) 404), printed to the digits given.
func TestClopperPearsonWorkedValues(t *testing.T) {
	// 2 of 12 at 95%: published R output, binom.test(2, 12).
	lo, hi := ClopperPearson(2, 12, 0.95)
	near(t, "2 of 12 lower", lo, 0.02086253, 5e-9)
	near(t, "2 of 12 upper", hi, 0.48413775, 5e-9)

	// 682 of 925 at 95%: the R binom.test example (value from memory).
	lo, hi = ClopperPearson(682, 925, 0.95)
	near(t, "682 of 925 lower", lo, 0.7076683, 5e-8)
	near(t, "682 of 925 upper", hi, 0.7654066, 5e-8)

	// 0 of 10 at 95%: closed form 1 - 0.025^(1/10).
	lo, hi = ClopperPearson(0, 10, 0.95)
	near(t, "0 of 10 lower", lo, 0, 0)
	near(t, "0 of 10 upper", hi, 0.3084971, 5e-8)

	// 10 of 10 mirrors 0 of 10.
	lo, hi = ClopperPearson(10, 10, 0.95)
	near(t, "10 of 10 lower", lo, 1-0.3084971, 5e-8)
	near(t, "10 of 10 upper", hi, 1, 0)

	lo, hi = ClopperPearson(0, 0, 0.95)
	if lo != 0 || hi != 1 {
		t.Errorf("0 of 0 = [%v, %v], want [0, 1]", lo, hi)
	}
}

// Over a grid of (k, n), the intervals agree with the Beta quantiles of
// the reference library gonum (stat/distuv.Beta.Quantile), whose
// parameters must be > 0: k = 0 and k = n are checked on the side where
// the Beta distribution exists, and their closed form on the other.
func TestClopperPearsonAgainstGonum(t *testing.T) {
	for _, cl := range []float64{0.6827, 0.90, 0.95, 0.99} {
		half := (1 - cl) / 2
		for _, n := range []int{1, 2, 3, 5, 10, 17, 50, 100, 333, 1000, 12345, 200000} {
			ks := []int{0, 1, 2, n / 3, n / 2, n - 2, n - 1, n}
			for _, k := range ks {
				if k < 0 || k > n {
					continue
				}
				lo, hi := ClopperPearson(k, n, cl)
				fk, fn := float64(k), float64(n)
				if k > 0 {
					want := distuv.Beta{Alpha: fk, Beta: fn - fk + 1}.Quantile(half)
					near(t, "lower", lo, want, 1e-9*math.Max(want, 1e-3))
				} else if lo != 0 {
					t.Errorf("k=0 n=%d: lower %v, want 0", n, lo)
				}
				if k < n {
					want := distuv.Beta{Alpha: fk + 1, Beta: fn - fk}.Quantile(1 - half)
					near(t, "upper", hi, want, 1e-9*math.Max(1-want, 1e-3))
				} else if hi != 1 {
					t.Errorf("k=n=%d: upper %v, want 1", n, hi)
				}
				if !(lo <= fk/fn && fk/fn <= hi) {
					t.Errorf("k=%d n=%d cl=%v: interval [%v, %v] misses %v", k, n, cl, lo, hi, fk/fn)
				}
			}
		}
	}
}

// The regularized incomplete beta function agrees with gonum's
// mathext.RegIncBeta, and the quantile inverts it.
func TestRegIncBetaAgainstGonum(t *testing.T) {
	for _, a := range []float64{0.3, 1, 2.5, 10, 400, 1e5} {
		for _, b := range []float64{0.7, 1, 3, 50, 2e4} {
			for _, x := range []float64{1e-6, 0.01, 0.2, 0.5, 0.77, 0.99, 1 - 1e-7} {
				got, want := RegIncBeta(a, b, x), mathext.RegIncBeta(a, b, x)
				near(t, "RegIncBeta", got, want, 1e-10)
				if want > 1e-12 && want < 1-1e-12 {
					// Compared in x: near x = 1 a steep distribution
					// function amplifies the last bit of x.
					q := BetaQuantile(want, a, b)
					near(t, "BetaQuantile(RegIncBeta)", q, x, 1e-9*math.Min(x, 1-x)+2e-15)
				}
			}
		}
	}
}

// Unit weights give the binomial error sqrt(k (n-k) / n) / n.
func TestCountFractionBinomial(t *testing.T) {
	var c Count
	for range 30 {
		c.Add(1)
	}
	f, e := c.Fraction(1000)
	near(t, "fraction", f, 0.03, 1e-15)
	near(t, "error", e, math.Sqrt(30*970.0/1000)/1000, 1e-15)
	r, re := c.Rate(1000, 2e7)
	near(t, "rate", r, 0.03*2e7, 1e-6)
	near(t, "rate error", re, e*2e7, 1e-6)

	// Equal weights w scale both by w.
	var w Count
	for range 30 {
		w.Add(0.25)
	}
	fw, ew := w.Fraction(1000)
	near(t, "weighted fraction", fw, 0.25*0.03, 1e-15)
	near(t, "weighted error", ew, 0.25*e, 1e-15)
	if f, e := (Count{}).Fraction(0); f != 0 || e != 0 {
		t.Errorf("empty = %v +- %v", f, e)
	}
}
