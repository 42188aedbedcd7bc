//go:build unix

package usage

import (
	"runtime"
	"syscall"
	"time"
)

// Available reports whether Process and PeakRSS read real values here.
const Available = true

// Process returns the processor time the process has used so far
// (getrusage RUSAGE_SELF), or zero if the system refuses to say. It is
// safe for concurrent use.
func Process() CPU {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return CPU{}
	}
	return CPU{User: time.Duration(ru.Utime.Nano()), System: time.Duration(ru.Stime.Nano())}
}

// PeakRSS returns the process's peak resident set in bytes (getrusage
// ru_maxrss: KiB on Linux and the BSDs, bytes on macOS), or zero if the
// system refuses to say. It is safe for concurrent use.
func PeakRSS() uint64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	if runtime.GOOS == "darwin" || runtime.GOOS == "ios" {
		return uint64(ru.Maxrss)
	}
	return uint64(ru.Maxrss) * 1024
}
