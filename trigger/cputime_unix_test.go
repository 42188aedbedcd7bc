//go:build unix

package trigger

import (
	"syscall"
	"time"
)

// cpuTime returns the CPU time (user and system) the test process has used
// so far, or 0 if it cannot be read.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
