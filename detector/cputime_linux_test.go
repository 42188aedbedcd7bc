package detector

import (
	"syscall"
	"time"
)

// rusageThread is Linux's RUSAGE_THREAD: the calling thread only.
const rusageThread = 1

// threadCPUTime returns the CPU time the calling OS thread has used, user
// plus system; the caller locks its goroutine to the thread.
func threadCPUTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
