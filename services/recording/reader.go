package recording

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"

	"github.com/klauspost/compress/s2"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Reader reads a stream file batch by batch. It is not safe for concurrent
// use.
type Reader struct {
	f       *os.File
	size    int64 // the bytes of f read: its length when opened
	clone   bool  // f belongs to the Reader this one was cloned from
	r       *bufio.Reader
	path    string
	header  pb.StreamHeader
	trailer *pb.StreamTrailer
	offset  int64  // of the next unread byte
	frameAt int64  // offset of the frame being read
	stored  []byte // the frame as stored
	dec     []byte // storage for decompressed frames
	raw     []byte // the frame's batches: stored, or decompressed into dec
	pos     int    // next batch inside raw
	err     error

	onTruth  func(*TruthRecord)
	truthRec TruthRecord
}

// Open opens path and reads its header. The reader reads the file as
// long as it was when opened: a file still being written ends, for it,
// without a trailer (ErrTruncated).
func Open(path string) (*Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("recording: %w", err)
	}
	info, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("recording: %w", err)
	}
	r := newReader(f, path, info.Size())
	if err := r.readHeader(); err != nil {
		f.Close()
		return nil, err
	}
	return r, nil
}

// Clone returns a reader of the same stream from its start, reading the
// bytes r reads (the file as long as it was when r was opened) through a
// read position of its own, so that goroutines can each read the whole
// stream with a Reader of their own. The clone shares r's file: closing
// the clone does nothing, and it must not be used once r is closed.
func (r *Reader) Clone() (*Reader, error) {
	c := newReader(r.f, r.path, r.size)
	c.clone = true
	if err := c.readHeader(); err != nil {
		return nil, err
	}
	return c, nil
}

func newReader(f *os.File, path string, size int64) *Reader {
	// Frame bodies (up to a MiB) are read past the buffer, straight into
	// the frame's storage: bufio reads into the caller's slice when its
	// own buffer is empty and smaller than the read.
	return &Reader{f: f, size: size, path: path, r: bufio.NewReaderSize(io.NewSectionReader(f, 0, size), 64<<10)}
}

// readHeader reads and checks the stream header.
func (r *Reader) readHeader() error {
	var head [len(Magic) + 8]byte
	if _, err := io.ReadFull(r.r, head[:]); err != nil {
		return r.fail(0, "file shorter than its header", ErrTruncated)
	}
	if string(head[:len(Magic)]) != Magic {
		return r.fail(0, "not a bunchsieve stream file (bad magic)", ErrCorrupt)
	}
	n := binary.LittleEndian.Uint32(head[len(Magic):])
	sum := binary.LittleEndian.Uint32(head[len(Magic)+4:])
	if n > maxFrame {
		return r.fail(int64(len(Magic)), fmt.Sprintf("header length %d too large", n), ErrCorrupt)
	}
	hb := make([]byte, n)
	if _, err := io.ReadFull(r.r, hb); err != nil {
		return r.fail(int64(len(head)), "file ends inside the header", ErrTruncated)
	}
	if crc32.Checksum(hb, castagnoli) != sum {
		return r.fail(int64(len(head)), "header checksum mismatch", ErrCorrupt)
	}
	if err := proto.Unmarshal(hb, &r.header); err != nil {
		return r.fail(int64(len(head)), "header does not decode: "+err.Error(), ErrCorrupt)
	}
	if v := r.header.FormatVersion; v != FormatVersion && v != FormatVersionTruth {
		return r.fail(int64(len(head)), fmt.Sprintf("format version %d, this build reads %d and %d", v, FormatVersion, FormatVersionTruth), ErrCorrupt)
	}
	r.offset = int64(len(head)) + int64(n)
	return nil
}

func (r *Reader) fail(off int64, reason string, kind error) error {
	return &FormatError{Path: r.path, Offset: off, Reason: reason, Err: kind}
}

// Header returns the stream's header.
func (r *Reader) Header() *pb.StreamHeader { return &r.header }

// Trailer returns the trailer once Next has returned io.EOF, else nil.
func (r *Reader) Trailer() *pb.StreamTrailer { return r.trailer }

// Next returns the next batch. At the trailer it returns io.EOF; on damage
// a *FormatError naming the byte offset, after every intact batch before
// the damage has been returned.
func (r *Reader) Next() (Batch, error) {
	for {
		if r.err != nil {
			return Batch{}, r.err
		}
		if r.pos < len(r.raw) {
			return r.batch()
		}
		if err := r.readFrame(); err != nil {
			r.err = err
		}
	}
}

func (r *Reader) batch() (Batch, error) {
	rest := r.raw[r.pos:]
	if len(rest) < batchHeaderSize {
		r.err = r.fail(r.frameAt, "frame ends inside a batch header", ErrCorrupt)
		return Batch{}, r.err
	}
	n := int(binary.LittleEndian.Uint32(rest[18:]))
	if n > len(rest)-batchHeaderSize {
		r.err = r.fail(r.frameAt, "batch runs past the end of its frame", ErrCorrupt)
		return Batch{}, r.err
	}
	b := Batch{
		SourceID:         binary.LittleEndian.Uint32(rest[0:]),
		Partition:        int(binary.LittleEndian.Uint16(rest[4:])),
		FirstTimestampNs: int64(binary.LittleEndian.Uint64(rest[6:])),
		Fragments:        int(binary.LittleEndian.Uint32(rest[14:])),
		Data:             rest[batchHeaderSize : batchHeaderSize+n],
	}
	r.pos += batchHeaderSize + n
	return b, nil
}

func (r *Reader) readFrame() error {
	r.frameAt = r.offset
	var h [frameHeaderSize]byte
	if k, err := io.ReadFull(r.r, h[:]); err != nil {
		if k == 0 && errors.Is(err, io.EOF) {
			return r.fail(r.offset, "file ends without a trailer", ErrTruncated)
		}
		return r.fail(r.offset, "file ends inside a frame header", ErrTruncated)
	}
	kind, codec := h[0], h[1]
	stored := binary.LittleEndian.Uint32(h[2:])
	rawLen := binary.LittleEndian.Uint32(h[6:])
	sum := binary.LittleEndian.Uint32(h[10:])
	knownKind := kind == kindBatches || kind == kindTrailer || (kind == kindTruth && r.HasTruth())
	if !knownKind || codec > codecS2 || stored > maxFrame || rawLen > maxFrame {
		return r.fail(r.offset, fmt.Sprintf("bad frame header (kind %d, codec %d, length %d)", kind, codec, stored), ErrCorrupt)
	}
	if cap(r.stored) < int(stored) {
		r.stored = make([]byte, stored)
	}
	r.stored = r.stored[:stored]
	if _, err := io.ReadFull(r.r, r.stored); err != nil {
		return r.fail(r.offset, fmt.Sprintf("file ends inside a frame of %d bytes", stored), ErrTruncated)
	}
	if crc32.Checksum(r.stored, castagnoli) != sum {
		return r.fail(r.offset, "frame checksum mismatch", ErrCorrupt)
	}
	raw := r.stored
	if codec == codecS2 {
		var err error
		if cap(r.dec) < int(rawLen) {
			r.dec = make([]byte, rawLen)
		}
		raw, err = s2.Decode(r.dec[:cap(r.dec)], r.stored)
		if err != nil || len(raw) != int(rawLen) {
			return r.fail(r.offset, "frame does not decompress", ErrCorrupt)
		}
	} else if int(rawLen) != len(raw) {
		return r.fail(r.offset, "frame lengths disagree", ErrCorrupt)
	}
	r.offset += frameHeaderSize + int64(stored)
	if kind == kindTrailer {
		var t pb.StreamTrailer
		if err := proto.Unmarshal(raw, &t); err != nil {
			return r.fail(r.frameAt, "trailer does not decode", ErrCorrupt)
		}
		r.trailer = &t
		r.raw, r.pos = r.raw[:0], 0
		return io.EOF
	}
	if kind == kindTruth {
		// Truth frames hold no batches: hand the records over and leave
		// the batch position empty, so Next reads on.
		r.raw, r.pos = r.raw[:0], 0
		return r.decodeTruth(raw)
	}
	// The batches stay in raw, a view of r.stored or r.dec, until the
	// next frame is read.
	r.raw, r.pos = raw, 0
	return nil
}

// Close closes the file, unless r is a clone.
func (r *Reader) Close() error {
	if r.clone {
		return nil
	}
	return r.f.Close()
}

// Offset returns the byte offset in the file of the next unread frame,
// for progress reports.
func (r *Reader) Offset() int64 { return r.offset }
