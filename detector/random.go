package detector

import (
	"math"
	"math/rand/v2"
)

// The samplers below are exact in distribution (up to floating point); each
// names its method.

// uniformOpen returns a uniform variate in (0, 1], safe to take the log of.
func uniformOpen(r *rand.Rand) float64 { return 1 - r.Float64() }

// poissonVariate draws a Poisson variate of mean mu: by multiplying
// uniforms below mu = 10, above it by the transformed rejection method PTRS
// of W. Hoermann, "The transformed rejection method for generating Poisson
// random variables", Insurance: Mathematics and Economics 12 (1993) 39.
func poissonVariate(r *rand.Rand, mu float64) int {
	if !(mu > 0) {
		return 0
	}
	if mu < 10 {
		l := math.Exp(-mu)
		k, p := 0, r.Float64()
		for p > l {
			k++
			p *= r.Float64()
		}
		return k
	}
	slam := math.Sqrt(mu)
	loglam := math.Log(mu)
	b := 0.931 + 2.53*slam
	a := -0.059 + 0.02483*b
	invalpha := 1.1239 + 1.1328/(b-3.4)
	vr := 0.9277 - 3.6224/(b-2)
	for {
		u := r.Float64() - 0.5
		v := r.Float64()
		us := 0.5 - math.Abs(u)
		k := math.Floor((2*a/us+b)*u + mu + 0.43)
		if us >= 0.07 && v <= vr {
			return int(k)
		}
		if k < 0 || (us < 0.013 && v > us) {
			continue
		}
		lg, _ := math.Lgamma(k + 1)
		if math.Log(v)+math.Log(invalpha)-math.Log(a/(us*us)+b) <= -mu+k*loglam-lg {
			return int(k)
		}
	}
}

// gammaVariate draws a gamma variate of shape k > 0 and scale theta by the
// method of G. Marsaglia and W.W. Tsang, ACM TOMS 26 (2000) 363, with their
// u^(1/k) boost for k < 1.
func gammaVariate(r *rand.Rand, k, theta float64) float64 {
	if k < 1 {
		return gammaVariate(r, k+1, theta) * math.Pow(uniformOpen(r), 1/k)
	}
	d := k - 1.0/3
	c := 1 / math.Sqrt(9*d)
	for {
		x := r.NormFloat64()
		v := 1 + c*x
		if v <= 0 {
			continue
		}
		v = v * v * v
		u := uniformOpen(r)
		if u < 1-0.0331*x*x*x*x || math.Log(u) < 0.5*x*x+d*(1-v+math.Log(v)) {
			return d * v * theta
		}
	}
}

// negBinomialVariate draws a negative binomial count of the given mean and
// shape k as a Poisson variate whose mean is gamma distributed.
func negBinomialVariate(r *rand.Rand, mean, k float64) int {
	return poissonVariate(r, gammaVariate(r, k, mean/k))
}

// normalTailVariate draws a standard normal variate conditioned on being at
// least a: by plain rejection for a < 1, otherwise by G. Marsaglia's tail
// method (Technometrics 6 (1964) 101).
func normalTailVariate(r *rand.Rand, a float64) float64 {
	if a < 1 {
		for {
			if x := r.NormFloat64(); x >= a {
				return x
			}
		}
	}
	for {
		x := r.ExpFloat64() / a
		y := r.ExpFloat64()
		if 2*y > x*x {
			return a + x
		}
	}
}

// moyalVariate draws from the Moyal distribution, a closed-form
// approximation of the Landau distribution of ionisation losses: if lambda
// is Moyal, exp(-lambda) is chi-squared with one degree of freedom.
func moyalVariate(r *rand.Rand) float64 {
	for {
		z := r.NormFloat64()
		if z2 := z * z; z2 > 0 {
			return -math.Log(z2)
		}
	}
}

// breitWignerMass draws a mass from the relativistic Breit-Wigner
// distribution with constant width, dP/dm^2 ~ 1/((m^2-M^2)^2 + M^2 Gamma^2),
// truncated to [lo, hi], by inverting its cumulative distribution.
func breitWignerMass(r *rand.Rand, m, width, lo, hi float64) float64 {
	mg := m * width
	t0 := math.Atan((lo*lo - m*m) / mg)
	t1 := math.Atan((hi*hi - m*m) / mg)
	t := t0 + (t1-t0)*r.Float64()
	return math.Sqrt(m*m + mg*math.Tan(t))
}

// isotropic returns a unit vector drawn uniformly over the sphere.
func isotropic(r *rand.Rand) (x, y, z float64) {
	z = 2*r.Float64() - 1
	phi := 2 * math.Pi * r.Float64()
	s := math.Sqrt(1 - z*z)
	return s * math.Cos(phi), s * math.Sin(phi), z
}

// twoBodyDecay decays a parent of four-momentum parent into masses m1, m2,
// isotropically in the parent's rest frame. The parent's mass must exceed
// m1 + m2.
func twoBodyDecay(r *rand.Rand, parent FourMomentum, m1, m2 float64) (FourMomentum, FourMomentum) {
	m := parent.M()
	// Momentum of either daughter in the rest frame (PDG "Kinematics").
	p := math.Sqrt(math.Max((m*m-(m1+m2)*(m1+m2))*(m*m-(m1-m2)*(m1-m2)), 0)) / (2 * m)
	x, y, z := isotropic(r)
	d1 := FourMomentum{p * x, p * y, p * z, math.Sqrt(p*p + m1*m1)}
	d2 := FourMomentum{-p * x, -p * y, -p * z, math.Sqrt(p*p + m2*m2)}
	return d1.Boost(parent), d2.Boost(parent)
}
