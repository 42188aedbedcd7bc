package detector

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// The Poisson sampler against the Poisson probabilities p(k) = mu^k e^-mu/k!
// by a chi-squared test, below (multiplication) and above (PTRS) mu = 10.
// The bound is the 99.9% point of chi-squared for the degrees of freedom
// used (Wilson-Hilferty approximation).
func TestPoissonMatchesDistribution(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	for _, mu := range []float64{3.7, 25.2, 60, 130} {
		const n = 100000
		counts := map[int]int{}
		for range n {
			counts[poissonVariate(r, mu)]++
		}
		lo := int(mu - 4*math.Sqrt(mu))
		hi := int(mu + 4*math.Sqrt(mu))
		lo = max(lo, 0)
		chi2, dof := 0.0, -1
		var obsTail, expTail float64
		for k := 0; k <= hi+50; k++ {
			lg, _ := math.Lgamma(float64(k + 1))
			e := n * math.Exp(float64(k)*math.Log(mu)-mu-lg)
			o := float64(counts[k])
			if k < lo || k > hi {
				obsTail += o
				expTail += e
				continue
			}
			chi2 += (o - e) * (o - e) / e
			dof++
		}
		chi2 += (obsTail - expTail) * (obsTail - expTail) / expTail
		dof++
		d := float64(dof)
		crit := d * math.Pow(1-2/(9*d)+3.09*math.Sqrt(2/(9*d)), 3)
		if chi2 > crit {
			t.Errorf("mu %v: chi2 %.1f for %d dof, above %.1f", mu, chi2, dof, crit)
		}
	}
}

// Gamma(k, theta) has mean k theta and variance k theta^2; a negative
// binomial of mean m and shape k has variance m + m^2/k (definitions).
func TestGammaAndNegativeBinomialMoments(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	for _, k := range []float64{0.4, 2, 6, 1e4} {
		const n = 200000
		s, s2 := 0.0, 0.0
		for range n {
			x := gammaVariate(r, k, 1.5)
			s += x
			s2 += x * x
		}
		mean := s / n
		v := s2/n - mean*mean
		near(t, "gamma mean", mean, 1.5*k, 4*1.5*math.Sqrt(k/n))
		near(t, "gamma variance", v, k*2.25, 0.03*k*2.25)
	}
	const n = 100000
	s, s2 := 0.0, 0.0
	for range n {
		x := float64(negBinomialVariate(r, 100, 2))
		s += x
		s2 += x * x
	}
	mean := s / n
	near(t, "NBD mean", mean, 100, 1.5)
	near(t, "NBD variance", s2/n-mean*mean, 100+100*100/2.0, 0.03*5100)
}

// Conditional moments of the standard normal above a: P(X > b | X > a) =
// Q(b)/Q(a) and E[X | X > a] = phi(a)/Q(a) (the inverse Mills ratio).
func TestNormalTail(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	q := func(a float64) float64 { return 0.5 * math.Erfc(a/math.Sqrt2) }
	for _, a := range []float64{0.3, 1.7, 2.5, 6} {
		const n = 200000
		s, above := 0.0, 0
		b := a + 0.5
		for range n {
			x := normalTailVariate(r, a)
			if x < a {
				t.Fatalf("tail variate %v below %v", x, a)
			}
			s += x
			if x > b {
				above++
			}
		}
		mills := math.Exp(-a*a/2) / math.Sqrt(2*math.Pi) / q(a)
		near(t, "E[X|X>a]", s/n, mills, 0.01*mills)
		p := q(b) / q(a)
		near(t, "P(X>a+0.5|X>a)", float64(above)/n, p, 4*math.Sqrt(p*(1-p)/n))
	}
	// bernoulliQ must agree with u < Q(a) everywhere, table or not.
	for i := range 20000 {
		a := lowSigmas + 12*r.Float64()
		u := q(a) * 2 * r.Float64()
		if i%7 == 0 {
			u = q(a) // on the boundary
		}
		if got, want := bernoulliQ(u, a), u < q(a); got != want {
			t.Fatalf("bernoulliQ(%v, %v) = %v, want %v", u, a, got, want)
		}
	}
}

// The Moyal distribution has mean gamma_E + ln 2 and variance pi^2/2 (J.E.
// Moyal, Phil. Mag. 46 (1955) 263, memory).
func TestMoyal(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 8))
	const n = 400000
	s, s2 := 0.0, 0.0
	for range n {
		x := moyalVariate(r)
		s += x
		s2 += x * x
	}
	mean := s / n
	near(t, "Moyal mean", mean, 0.5772156649+math.Ln2, 0.01)
	near(t, "Moyal variance", s2/n-mean*mean, math.Pi*math.Pi/2, 0.1)
}

// The truncated relativistic Breit-Wigner against its cumulative
// distribution F(m) = (atan((m^2-M^2)/(M Gamma)) - t0)/(t1 - t0), with the
// PDG 2024 Z mass and width.
func TestBreitWigner(t *testing.T) {
	r := rand.New(rand.NewPCG(9, 10))
	lo, hi := 66.0, 116.0
	mg := MassZ * WidthZ
	t0 := math.Atan((lo*lo - MassZ*MassZ) / mg)
	t1 := math.Atan((hi*hi - MassZ*MassZ) / mg)
	cdf := func(m float64) float64 { return (math.Atan((m*m-MassZ*MassZ)/mg) - t0) / (t1 - t0) }
	const n = 200000
	cuts := []float64{70, 85, MassZ - WidthZ/2, MassZ, MassZ + WidthZ/2, 95, 110}
	below := make([]int, len(cuts))
	for range n {
		m := breitWignerMass(r, MassZ, WidthZ, lo, hi)
		if m < lo || m > hi {
			t.Fatalf("mass %v outside [%v, %v]", m, lo, hi)
		}
		for i, c := range cuts {
			if m < c {
				below[i]++
			}
		}
	}
	for i, c := range cuts {
		p := cdf(c)
		near(t, "F("+strconv.FormatFloat(c, 'f', 2, 64)+")", float64(below[i])/n, p, 4*math.Sqrt(p*(1-p)/n)+1e-4)
	}
}

// The ziggurat normal sampler against the standard normal distribution
// function Phi (chi-squared over 40 bins of width 0.2, plus the share beyond
// the ziggurat's base r = 3.4426, which takes the tail path), and the
// uniform draws' first two moments (1/2, 1/12).
func TestFastRandNormal(t *testing.T) {
	f, _ := testStreams(13, 14)
	const n = 2000000
	const bins = 40
	var counts [bins + 2]int
	tail := 0
	s, s2 := 0.0, 0.0
	for range n {
		x := f.norm()
		s += x
		s2 += x * x
		b := int(math.Floor(x/0.2)) + bins/2 + 1
		b = max(0, min(b, bins+1))
		counts[b]++
		if math.Abs(x) > zigR {
			tail++
		}
	}
	phi := func(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }
	chi2 := 0.0
	for b := range counts {
		lo, hi := math.Inf(-1), math.Inf(1)
		if b > 0 {
			lo = float64(b-bins/2-1) * 0.2
		}
		if b < bins+1 {
			hi = float64(b-bins/2) * 0.2
		}
		e := n * (phi(hi) - phi(lo))
		chi2 += (float64(counts[b]) - e) * (float64(counts[b]) - e) / e
	}
	// 99.9% point of chi-squared with 41 degrees of freedom is 74.7.
	if chi2 > 74.7 {
		t.Errorf("normal chi2 = %.1f for 41 dof", chi2)
	}
	near(t, "normal mean", s/n, 0, 5/math.Sqrt(n))
	near(t, "normal variance", s2/n, 1, 0.005)
	pt := 2 * (1 - phi(zigR))
	near(t, "share beyond r", float64(tail)/n, pt, 5*math.Sqrt(pt/n))
	u, u2 := 0.0, 0.0
	for range n {
		x := f.float64()
		u += x
		u2 += x * x
	}
	near(t, "uniform mean", u/n, 0.5, 0.002)
	near(t, "uniform variance", u2/n-(u/n)*(u/n), 1.0/12, 0.001)
	// Seeding is a function of the seed words only.
	g, _ := testStreams(13, 14)
	h, _ := testStreams(13, 15)
	f.seed(13, 14)
	if f.Uint64() != g.Uint64() || g.Uint64() == h.Uint64() {
		t.Error("seeding is not a function of the seed words")
	}
}
