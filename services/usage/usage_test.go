package usage

import (
	"testing"
	"time"
)

// Spinning for a while shows up as user time, at least most of it (the
// goroutine may be descheduled), and never more than the wall time on
// one goroutine plus the rest of the test binary's work.
func TestProcessCountsSpinning(t *testing.T) {
	if !Available {
		t.Skip("no processor-time accounting on this system")
	}
	before := Process()
	start := time.Now()
	x := 1.0
	for time.Since(start) < 200*time.Millisecond {
		for range 1000 {
			x = x*1.0000001 + 1e-9
		}
	}
	wall := time.Since(start)
	used := Process().Sub(before)
	if used.User < wall/4 || used.Total() > 4*wall {
		t.Fatalf("spun %v, process used %+v (x %v)", wall, used, x)
	}
}

// Touching 64 MiB raises the peak resident set by about that much.
func TestPeakRSSSeesTouchedMemory(t *testing.T) {
	if !Available {
		t.Skip("no resident-set accounting on this system")
	}
	before := PeakRSS()
	if before == 0 {
		t.Fatal("peak resident set 0")
	}
	const n = 64 << 20
	b := make([]byte, n)
	for i := 0; i < n; i += 4096 {
		b[i] = 1
	}
	after := PeakRSS()
	if after < before || after-before < n/2 && after < n {
		t.Fatalf("peak resident set %d before and %d after touching %d bytes", before, after, n)
	}
	b[n-1] = 2
}
