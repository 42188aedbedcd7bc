package telemetry

import (
	"math/rand/v2"
	"slices"
	"testing"
	"time"
)

func TestBucketsCoverAndOrder(t *testing.T) {
	prev := -1
	for _, ns := range []uint64{0, 1, 63, 64, 65, 127, 128, 1000, 1 << 20, 1<<40 + 12345, 1<<63 - 1} {
		b := bucketOf(ns)
		if b <= prev && ns > 0 {
			t.Fatalf("bucket of %d = %d not after %d", ns, b, prev)
		}
		if ns > bucketUpper(b) || (b > 0 && ns <= bucketUpper(b-1)) {
			t.Fatalf("%d not inside bucket %d (upper %d)", ns, b, bucketUpper(b))
		}
		prev = b
	}
}

// The quantiles agree with exact order statistics of the same sample to the
// histogram's stated resolution of 1/64.
func TestQuantileAgainstSortedSample(t *testing.T) {
	var l Latency
	r := rand.New(rand.NewPCG(1, 2))
	xs := make([]time.Duration, 100000)
	for i := range xs {
		xs[i] = time.Duration(r.ExpFloat64() * float64(2*time.Millisecond))
		l.Record(xs[i])
	}
	slices.Sort(xs)
	for _, q := range []float64{0.5, 0.9, 0.99, 0.999} {
		exact := xs[int(q*float64(len(xs)))-1]
		got := l.Quantile(q)
		if got < exact || float64(got-exact) > float64(exact)/64+1 {
			t.Errorf("q%v = %v, exact %v", q, got, exact)
		}
	}
	if l.Count() != uint64(len(xs)) || l.Max() != xs[len(xs)-1] {
		t.Errorf("count %d max %v", l.Count(), l.Max())
	}
	l.Reset()
	if l.Quantile(0.5) != 0 || l.Count() != 0 {
		t.Error("reset histogram not empty")
	}
}
