//go:build !unix

package replay

// cpuSeconds is not measured on this system.
func cpuSeconds() float64 { return 0 }
