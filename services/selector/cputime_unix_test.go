//go:build unix

package selector

import (
	"syscall"
	"time"
)

// cpuTime returns the CPU time (user and system) the test process has used
// so far, or 0 if it cannot be read. Benchmarks report it beside wall time
// because the machine they run on is shared.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
