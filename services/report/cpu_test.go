package report

import "github.com/bunchsieve/bunchsieve/services/usage"

// cpuSeconds returns the CPU time (user and system) the test process has
// used so far, in seconds, or 0 where it cannot be read.
func cpuSeconds() float64 { return usage.Process().Total().Seconds() }
