// Package recording reads and writes recorded stream files: a header that
// carries the run configuration, then checksummed frames of fragment
// batches exactly as they travel on the wire, then a trailer. The format
// is documented in docs/stream-format.md.
package recording

import (
	"errors"
	"fmt"
	"hash/crc32"
)

// Magic opens every stream file.
const Magic = "BSIEVE\x00\x01"

// FormatVersion is the version this package writes.
const FormatVersion = 1

// Frame kinds and codecs.
const (
	kindBatches = 1
	kindTrailer = 2

	codecNone = 0
	codecS2   = 1
)

// frameHeaderSize is kind(1) + codec(1) + stored(4) + raw(4) + crc(4).
const frameHeaderSize = 14

// batchHeaderSize is source(4) + partition(2) + first timestamp(8) +
// fragments(4) + length(4).
const batchHeaderSize = 22

// maxFrame bounds one frame, stored or raw, so a corrupted length cannot
// make a reader allocate without limit.
const maxFrame = 64 << 20

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// ErrTruncated reports a file that ends before its trailer.
var ErrTruncated = errors.New("recording: stream truncated")

// ErrCorrupt reports bytes that do not have the expected form or checksum.
var ErrCorrupt = errors.New("recording: stream corrupted")

// FormatError says where in the file reading failed. Everything before
// Offset was intact and has been delivered.
type FormatError struct {
	Path   string
	Offset int64
	Reason string
	Err    error // ErrTruncated or ErrCorrupt
}

func (e *FormatError) Error() string {
	kind := "corrupted"
	if errors.Is(e.Err, ErrTruncated) {
		kind = "truncated"
	}
	return fmt.Sprintf("recording: %s: %s at byte offset %d: %s", e.Path, kind, e.Offset, e.Reason)
}

func (e *FormatError) Unwrap() error { return e.Err }

// Batch is one recorded fragment batch.
type Batch struct {
	SourceID  uint32
	Partition int
	// FirstTimestampNs is the timestamp of the batch's first crossing, ns
	// from run start; replays pace on it.
	FirstTimestampNs int64
	// Fragments is the number of fragments in the batch.
	Fragments int
	// Data is the FragmentBatch protobuf as it was published. It is valid
	// until the next call to Next.
	Data []byte
}
