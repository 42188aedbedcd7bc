//go:build !unix

package selector

import "time"

// cpuTime returns 0: the process CPU time is read on Unix systems only.
func cpuTime() time.Duration { return 0 }
