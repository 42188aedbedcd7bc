//go:build !linux

package detector

import "time"

// threadCPUTime is not available here; the benchmark then reports the
// wall-clock rate only.
func threadCPUTime() time.Duration { return 0 }
