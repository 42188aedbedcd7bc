//go:build unix

package report

import "syscall"

// cpuSeconds returns the user and system CPU time of the process so far,
// so that benchmarks can report CPU per event, which other load on the
// machine does not inflate the way it inflates wall time.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) != nil {
		return 0
	}
	return float64(ru.Utime.Sec+ru.Stime.Sec) + float64(ru.Utime.Usec+ru.Stime.Usec)/1e6
}
