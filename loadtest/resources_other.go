//go:build !unix

package loadtest

import "time"

// cpuTime returns zero: the process CPU time is read on Unix systems only.
func cpuTime() (user, sys time.Duration) { return 0, 0 }

// maxRSS returns zero: the peak resident set is read on Unix systems only.
func maxRSS() uint64 { return 0 }
