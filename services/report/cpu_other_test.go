//go:build !unix

package report

// cpuSeconds is not measured on this system.
func cpuSeconds() float64 { return 0 }
