package stats

import "math"

// Count accumulates weighted events: how many, the sum of their weights
// and the sum of the squared weights. The zero value is an empty count.
// It is not safe for concurrent use.
type Count struct {
	N     uint64  // events added
	SumW  float64 // sum of weights
	SumW2 float64 // sum of squared weights
}

// Add counts one event of weight w.
func (c *Count) Add(w float64) {
	c.N++
	c.SumW += w
	c.SumW2 += w * w
}

// Merge adds the events of o.
func (c *Count) Merge(o Count) {
	c.N += o.N
	c.SumW += o.SumW
	c.SumW2 += o.SumW2
}

// Fraction returns the weighted share of total trials that c counts, f =
// SumW/total, and its standard error. The error is the standard error of
// the mean of y_i = w_i * pass_i over all trials,
//
//	var(f) = (SumW2 - SumW^2/total) / total^2,
//
// which for unit weights is the binomial k(1-k/n)/n^2. A total of zero
// gives (0, 0). It never returns a negative error.
func (c Count) Fraction(total uint64) (f, err float64) {
	if total == 0 {
		return 0, 0
	}
	n := float64(total)
	f = c.SumW / n
	v := (c.SumW2 - c.SumW*c.SumW/n) / (n * n)
	if !(v > 0) {
		return f, 0
	}
	return f, math.Sqrt(v)
}

// Rate returns the rate a count of passing events stands for, out of total
// processed crossings at crossingRateHz colliding crossings per second,
// with its standard error (see Fraction).
func (c Count) Rate(total uint64, crossingRateHz float64) (rate, err float64) {
	f, e := c.Fraction(total)
	return f * crossingRateHz, e * crossingRateHz
}
