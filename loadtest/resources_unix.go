//go:build unix

package loadtest

import (
	"runtime"
	"syscall"
	"time"
)

// cpuTime returns the process's user and system CPU time so far
// (getrusage RUSAGE_SELF): every goroutine of the harness, the services and
// the embedded NATS server together.
func cpuTime() (user, sys time.Duration) {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0, 0
	}
	return time.Duration(ru.Utime.Nano()), time.Duration(ru.Stime.Nano())
}

// maxRSS returns the process's peak resident set size in bytes
// (getrusage ru_maxrss: KiB on Linux and the BSDs, bytes on macOS).
func maxRSS() uint64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	if runtime.GOOS == "darwin" || runtime.GOOS == "ios" {
		return uint64(ru.Maxrss)
	}
	return uint64(ru.Maxrss) * 1024
}
