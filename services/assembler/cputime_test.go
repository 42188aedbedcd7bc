package assembler

import (
	"time"

	"github.com/bunchsieve/bunchsieve/services/usage"
)

// cpuTime returns the CPU time (user and system) the test process has used
// so far, or 0 where it cannot be read. Benchmarks report it beside wall
// time because the machine they run on is shared.
func cpuTime() time.Duration { return usage.Process().Total() }
