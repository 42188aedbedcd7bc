package stats

import (
	"fmt"
	"math"
)

// RegIncBeta returns the regularized incomplete beta function
// I_x(a, b) = B(x; a, b) / B(a, b), the cumulative distribution of the
// Beta(a, b) distribution at x. It panics unless a > 0, b > 0 and x is in
// [0, 1].
//
// It evaluates the continued fraction of I_x(a, b) (NIST DLMF 8.17.22) by
// the modified Lentz method, on whichever of I_x(a, b) and
// 1 - I_{1-x}(b, a) converges fast.
func RegIncBeta(a, b, x float64) float64 {
	if !(a > 0) || !(b > 0) || math.IsInf(a, 0) || math.IsInf(b, 0) {
		panic(fmt.Sprintf("stats: RegIncBeta(%v, %v, x) needs finite a, b > 0", a, b))
	}
	if !(x >= 0 && x <= 1) {
		panic(fmt.Sprintf("stats: RegIncBeta(a, b, %v) needs x in [0, 1]", x))
	}
	switch x {
	case 0:
		return 0
	case 1:
		return 1
	}
	if x > (a+1)/(a+b+2) {
		return 1 - RegIncBeta(b, a, 1-x)
	}
	return math.Exp(logBetaFront(a, b, x)) * betaFraction(a, b, x) / a
}

// logBetaFront returns ln(x^a (1-x)^b / B(a, b)).
func logBetaFront(a, b, x float64) float64 {
	la, _ := math.Lgamma(a)
	lb, _ := math.Lgamma(b)
	lab, _ := math.Lgamma(a + b)
	return a*math.Log(x) + b*math.Log1p(-x) + lab - la - lb
}

// betaFraction evaluates 1/(1+ d1/(1+ d2/(1+ ...))) with
// d_{2m+1} = -(a+m)(a+b+m)x / ((a+2m)(a+2m+1)) and
// d_{2m} = m(b-m)x / ((a+2m-1)(a+2m)), by the modified Lentz method. It
// converges in about sqrt(max(a, b)) terms for x below the mean.
func betaFraction(a, b, x float64) float64 {
	const tiny = 1e-300
	const eps = 1e-16
	maxTerms := 1000 + 10*int(math.Sqrt(math.Max(a, b)))
	c, d := 1.0, 1-(a+b)*x/(a+1)
	if math.Abs(d) < tiny {
		d = tiny
	}
	d = 1 / d
	h := d
	for m := 1; m <= maxTerms; m++ {
		fm := float64(m)
		// Even step.
		num := fm * (b - fm) * x / ((a + 2*fm - 1) * (a + 2*fm))
		d = 1 + num*d
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = 1 + num/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		h *= d * c
		// Odd step.
		num = -(a + fm) * (a + b + fm) * x / ((a + 2*fm) * (a + 2*fm + 1))
		d = 1 + num*d
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = 1 + num/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		delta := d * c
		h *= delta
		if math.Abs(delta-1) < eps {
			break
		}
	}
	return h
}

// BetaQuantile returns the x in [0, 1] with RegIncBeta(a, b, x) = p: the
// p-quantile of the Beta(a, b) distribution. It panics unless a > 0,
// b > 0 and p is in [0, 1].
//
// It runs Newton's method on the cumulative distribution inside a bracket
// that bisection keeps shrinking, so every step either converges
// quadratically or halves the interval; it stops at a relative change of
// 1e-15.
func BetaQuantile(p, a, b float64) float64 {
	if !(a > 0) || !(b > 0) || math.IsInf(a, 0) || math.IsInf(b, 0) {
		panic(fmt.Sprintf("stats: BetaQuantile(p, %v, %v) needs finite a, b > 0", a, b))
	}
	if !(p >= 0 && p <= 1) {
		panic(fmt.Sprintf("stats: BetaQuantile(%v, a, b) needs p in [0, 1]", p))
	}
	switch p {
	case 0:
		return 0
	case 1:
		return 1
	}
	la, _ := math.Lgamma(a)
	lb, _ := math.Lgamma(b)
	lab, _ := math.Lgamma(a + b)
	logNorm := lab - la - lb
	lo, hi := 0.0, 1.0
	x := a / (a + b) // the mean: a fair start
	for range 400 {
		f := RegIncBeta(a, b, x) - p
		if f == 0 {
			return x
		}
		if f < 0 {
			lo = x
		} else {
			hi = x
		}
		// The density at x: x^(a-1) (1-x)^(b-1) / B(a, b).
		pdf := math.Exp((a-1)*math.Log(x) + (b-1)*math.Log1p(-x) + logNorm)
		next := x - f/pdf
		if !(next > lo && next < hi) || math.IsInf(pdf, 0) || pdf == 0 {
			next = lo + (hi-lo)/2
		}
		if math.Abs(next-x) <= 1e-15*x || hi-lo <= 1e-300 {
			return next
		}
		x = next
	}
	return x
}
