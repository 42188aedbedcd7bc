package loadtest

import (
	"time"

	"github.com/bunchsieve/bunchsieve/services/usage"
)

// cpuTime returns the process's user and system CPU time so far: every
// goroutine of the harness, the services and the embedded NATS server
// together (zero where the system does not account it).
func cpuTime() (user, sys time.Duration) {
	c := usage.Process()
	return c.User, c.System
}

// maxRSS returns the process's peak resident set size in bytes, or zero
// where the system does not say.
func maxRSS() uint64 { return usage.PeakRSS() }
