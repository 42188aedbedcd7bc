// Package telemetry holds what the services share for measuring themselves:
// a lock-free latency histogram with quantiles and the helpers that register
// Prometheus metrics.
package telemetry

import (
	"math"
	"math/bits"
	"sync/atomic"
	"time"
)

// subBits sets the resolution: each power-of-two range of nanoseconds is
// split into 2^subBits linear buckets, so a quantile is exact to within
// 1/2^subBits = 1.6% of its value.
const subBits = 6

const (
	subCount = 1 << subBits
	ranges   = 64 - subBits
	buckets  = (ranges + 1) * subCount
)

// Latency is a high-dynamic-range histogram of durations from 1 ns to
// centuries with a relative resolution of 1/64. Record and Quantile are safe
// for concurrent use and allocation-free; the zero value is ready.
type Latency struct {
	counts [buckets]atomic.Uint64
	total  atomic.Uint64
	max    atomic.Int64
}

func bucketOf(ns uint64) int {
	if ns < subCount {
		return int(ns)
	}
	exp := 63 - bits.LeadingZeros64(ns) // ns in [2^exp, 2^(exp+1))
	shift := exp - subBits
	return (shift+1)*subCount + int(ns>>uint(shift)) - subCount
}

// bucketUpper returns the largest value that falls into bucket b.
func bucketUpper(b int) uint64 {
	if b < subCount {
		return uint64(b)
	}
	shift := b/subCount - 1
	mant := uint64(b%subCount + subCount)
	return (mant+1)<<uint(shift) - 1
}

// Record adds one observation; negative durations count as zero.
func (l *Latency) Record(d time.Duration) {
	ns := max(int64(d), 0)
	l.counts[bucketOf(uint64(ns))].Add(1)
	l.total.Add(1)
	for {
		m := l.max.Load()
		if ns <= m || l.max.CompareAndSwap(m, ns) {
			break
		}
	}
}

// Count returns the number of observations.
func (l *Latency) Count() uint64 { return l.total.Load() }

// Max returns the largest observation.
func (l *Latency) Max() time.Duration { return time.Duration(l.max.Load()) }

// Quantile returns the smallest bucket bound below which a fraction q of the
// observations lie (the upper edge of the bucket holding the q-th value, so
// never an underestimate by more than one bucket). It returns 0 when empty.
func (l *Latency) Quantile(q float64) time.Duration {
	n := l.total.Load()
	if n == 0 {
		return 0
	}
	rank := uint64(math.Ceil(q * float64(n)))
	rank = min(max(rank, 1), n)
	var seen uint64
	for b := range l.counts {
		seen += l.counts[b].Load()
		if seen >= rank {
			return time.Duration(min(bucketUpper(b), uint64(l.max.Load())))
		}
	}
	return l.Max()
}

// Reset clears the histogram. Observations recorded during a Reset may be
// partly lost; call it between measurement phases.
func (l *Latency) Reset() {
	for b := range l.counts {
		l.counts[b].Store(0)
	}
	l.total.Store(0)
	l.max.Store(0)
}
