package builder

import (
	"errors"
	"fmt"
)

// Sentinel errors that callers branch on. Add returns a *FragmentError that
// unwraps to one of them, so use errors.Is.
var (
	// ErrUnknownSource: the fragment's source is not in Config.Sources.
	ErrUnknownSource = errors.New("builder: fragment from unknown source")
	// ErrMalformed: wrong run, bunch counters out of range, or a checksum
	// that does not match.
	ErrMalformed = errors.New("builder: malformed fragment")
	// ErrOutOfTime: the timestamp is further than the tolerance from the
	// nominal time of the fragment's crossing.
	ErrOutOfTime = errors.New("builder: fragment out of time")
	// ErrDuplicate: the source has already reported this crossing.
	ErrDuplicate = errors.New("builder: duplicate fragment")
	// ErrLate: the crossing has already been emitted, or the watermark is
	// past it by more than the allowed lateness.
	ErrLate = errors.New("builder: late fragment")
	// ErrWindowFull: with policy Block, the fragment needs a new crossing
	// and the window is full. The fragment was not consumed.
	ErrWindowFull = errors.New("builder: window of tracked crossings is full")
)

// errNilFragment is returned for Add(nil); nothing is counted.
var errNilFragment = fmt.Errorf("builder: nil fragment: %w", ErrMalformed)

// Reason says why Add did not put a fragment into a crossing. Every reason
// but ReasonWindowFull is final and counted in Stats; ReasonWindowFull
// means the fragment was refused and not consumed.
type Reason int

// The reasons, in the order Add checks them for a fragment (the first
// failing check decides): checksum, run, source, counters, time, then
// duplicate or late.
const (
	ReasonMalformedChecksum Reason = iota + 1 // checksum does not match the content
	ReasonMalformedRun                        // another run's fragment
	ReasonUnknownSource                       // source not in Config.Sources
	ReasonMalformedBcid                       // bcid >= slots per orbit, or an orbit too large to time
	ReasonOutOfTime                           // timestamp and crossing disagree beyond the tolerance
	ReasonDuplicate                           // the source already reported the crossing
	ReasonLate                                // the crossing has left, or the watermark is past it
	ReasonWindowFull                          // refused, not consumed (policy Block)
)

// String returns a short snake_case name, fit for a metric label.
func (r Reason) String() string {
	switch r {
	case ReasonMalformedChecksum:
		return "malformed_checksum"
	case ReasonMalformedRun:
		return "malformed_run"
	case ReasonUnknownSource:
		return "unknown_source"
	case ReasonMalformedBcid:
		return "malformed_bcid"
	case ReasonOutOfTime:
		return "out_of_time"
	case ReasonDuplicate:
		return "duplicate"
	case ReasonLate:
		return "late"
	case ReasonWindowFull:
		return "window_full"
	}
	return fmt.Sprintf("Reason(%d)", int(r))
}

// Err returns the sentinel error of r, or nil for an unknown value.
func (r Reason) Err() error {
	switch r {
	case ReasonMalformedChecksum, ReasonMalformedRun, ReasonMalformedBcid:
		return ErrMalformed
	case ReasonUnknownSource:
		return ErrUnknownSource
	case ReasonOutOfTime:
		return ErrOutOfTime
	case ReasonDuplicate:
		return ErrDuplicate
	case ReasonLate:
		return ErrLate
	case ReasonWindowFull:
		return ErrWindowFull
	}
	return nil
}

// FragmentError is the error Add returns for a fragment it did not put
// into a crossing. It unwraps to the sentinel of its Reason. It holds
// copies of the fragment's fields, not the fragment.
type FragmentError struct {
	Reason      Reason
	SourceID    uint32
	Run         uint32
	Orbit       uint64
	Bcid        uint32
	TimestampNs int64
	// Crossing is the crossing the fragment was matched to (for out of
	// time, duplicate, late and window full), as orbit and bcid.
	CrossingOrbit uint64
	CrossingBcid  uint32
	// NominalNs is that crossing's nominal time.
	NominalNs int64

	// limit is what the check wanted: the run, the slots per orbit, the
	// tolerance in ns or the window size, depending on Reason.
	limit int64
	// counters marks an out-of-time fragment whose counters, not its
	// timestamp, disagree with the crossing (ByTimestamp mode), and a
	// counters-range fragment whose orbit, not bcid, is out of range.
	counters bool
}

// Error describes the fragment and the failed check.
func (e *FragmentError) Error() string {
	x := fmt.Sprintf("crossing orbit %d bcid %d", e.CrossingOrbit, e.CrossingBcid)
	switch e.Reason {
	case ReasonMalformedChecksum:
		return fmt.Sprintf("builder: fragment from source %d (orbit %d, bcid %d) fails its checksum", e.SourceID, e.Orbit, e.Bcid)
	case ReasonMalformedRun:
		return fmt.Sprintf("builder: fragment from source %d belongs to run %d, want run %d", e.SourceID, e.Run, e.limit)
	case ReasonUnknownSource:
		return fmt.Sprintf("builder: fragment from unknown source %d", e.SourceID)
	case ReasonMalformedBcid:
		if e.counters {
			return fmt.Sprintf("builder: fragment from source %d has orbit %d, beyond the crossings the builder can time", e.SourceID, e.Orbit)
		}
		return fmt.Sprintf("builder: fragment from source %d has bcid %d, want 0..%d", e.SourceID, e.Bcid, e.limit-1)
	case ReasonOutOfTime:
		if e.counters {
			return fmt.Sprintf("builder: fragment from source %d has counters orbit %d bcid %d, but its timestamp %d ns falls in %s",
				e.SourceID, e.Orbit, e.Bcid, e.TimestampNs, x)
		}
		return fmt.Sprintf("builder: fragment from source %d has timestamp %d ns, %d ns from %s at %d ns (tolerance %d ns)",
			e.SourceID, e.TimestampNs, e.TimestampNs-e.NominalNs, x, e.NominalNs, e.limit)
	case ReasonDuplicate:
		return fmt.Sprintf("builder: duplicate fragment from source %d for %s", e.SourceID, x)
	case ReasonLate:
		return fmt.Sprintf("builder: late fragment from source %d for %s at %d ns: its event has left or the watermark is past it", e.SourceID, x, e.NominalNs)
	case ReasonWindowFull:
		return fmt.Sprintf("builder: fragment from source %d for %s refused: window of %d tracked crossings is full", e.SourceID, x, e.limit)
	}
	return fmt.Sprintf("builder: fragment from source %d rejected (%v)", e.SourceID, e.Reason)
}

// Unwrap returns the sentinel error of e.Reason.
func (e *FragmentError) Unwrap() error { return e.Reason.Err() }
