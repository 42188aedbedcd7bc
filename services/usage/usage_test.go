package usage

import (
	"testing"
	"time"
)

// Spinning shows up as user time: the process's user time grows by 50 ms
// while one goroutine spins, within a generous deadline (the goroutine
// may be descheduled on a busy machine), and never by much more than the
// wall time the spin took on the machine's processors.
func TestProcessCountsSpinning(t *testing.T) {
	if !Available {
		t.Skip("no processor-time accounting on this system")
	}
	before := Process()
	start := time.Now()
	x := 1.0
	for Process().Sub(before).User < 50*time.Millisecond {
		if time.Since(start) > 20*time.Second {
			t.Fatalf("20 s of spinning added only %v of user time", Process().Sub(before).User)
		}
		for range 100000 {
			x = x*1.0000001 + 1e-9
		}
	}
	wall := time.Since(start)
	if used := Process().Sub(before); used.Total() > 8*wall+100*time.Millisecond {
		t.Fatalf("spun %v, process used %+v (x %v)", wall, used, x)
	}
}

// Touching 64 MiB makes the peak resident set at least that large (a
// high-water mark: the memory resident beside it may be less than the
// earlier peak).
func TestPeakRSSSeesTouchedMemory(t *testing.T) {
	if !Available {
		t.Skip("no resident-set accounting on this system")
	}
	const n = 64 << 20
	before := PeakRSS()
	if before == 0 {
		t.Fatal("peak resident set 0")
	}
	if before >= n {
		t.Skipf("the peak resident set is already %d bytes", before)
	}
	b := make([]byte, n)
	for i := 0; i < n; i += 4096 {
		b[i] = 1
	}
	if after := PeakRSS(); after < before || after < n {
		t.Fatalf("peak resident set %d before and %d after touching %d bytes", before, after, n)
	}
	b[n-1] = 2
}
