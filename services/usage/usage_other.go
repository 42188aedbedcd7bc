//go:build !unix

package usage

// Available reports whether Process and PeakRSS read real values here.
const Available = false

// Process returns zero: processor time is read on Unix systems only. It
// is safe for concurrent use.
func Process() CPU { return CPU{} }

// PeakRSS returns zero: the peak resident set is read on Unix systems
// only. It is safe for concurrent use.
func PeakRSS() uint64 { return 0 }
