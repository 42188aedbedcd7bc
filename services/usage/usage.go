// Package usage reads what the process has used so far: processor time
// and the peak resident set, as the operating system accounts them.
package usage

import "time"

// CPU is processor time used by the whole process: every goroutine, the
// garbage collector and anything else running in it.
type CPU struct {
	User, System time.Duration
}

// Total returns user plus system time.
func (c CPU) Total() time.Duration { return c.User + c.System }

// Sub returns the time used from before to c.
func (c CPU) Sub(before CPU) CPU {
	return CPU{User: c.User - before.User, System: c.System - before.System}
}
