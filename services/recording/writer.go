package recording

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"os"

	"github.com/klauspost/compress/s2"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// frameTarget is the raw size at which a frame is closed: large enough to
// compress well and to keep per-frame overhead negligible, small enough
// that damage loses little.
const frameTarget = 1 << 20

// Writer writes a stream file. It is not safe for concurrent use.
type Writer struct {
	f       *os.File
	w       *bufio.Writer
	path    string
	raw     []byte
	stored  []byte
	trailer pb.StreamTrailer
	closed  bool
	target  int // raw frame size; frameTarget except in tests

	withTruth    bool   // the file may carry truth frames (format version 2)
	truth        []byte // truth records not yet written
	trailerTruth uint64 // truth records written
	err          error  // the first error of the truth hook, returned later
}

// Create creates path and writes the header.
func Create(path string, h *pb.StreamHeader) (*Writer, error) {
	return create(path, h, FormatVersion)
}

func create(path string, h *pb.StreamHeader, version uint32) (*Writer, error) {
	h.FormatVersion = version
	hb, err := proto.Marshal(h)
	if err != nil {
		return nil, fmt.Errorf("recording: encode header: %w", err)
	}
	f, err := os.Create(path)
	if err != nil {
		return nil, fmt.Errorf("recording: %w", err)
	}
	w := &Writer{f: f, w: bufio.NewWriterSize(f, 1<<20), path: path, target: frameTarget}
	var head [8]byte
	binary.LittleEndian.PutUint32(head[0:], uint32(len(hb)))
	binary.LittleEndian.PutUint32(head[4:], crc32.Checksum(hb, castagnoli))
	for _, b := range [][]byte{[]byte(Magic), head[:], hb} {
		if _, err := w.w.Write(b); err != nil {
			f.Close()
			return nil, fmt.Errorf("recording: %s: %w", path, err)
		}
	}
	return w, nil
}

// WriteBatch appends one encoded FragmentBatch of fragments fragments.
func (w *Writer) WriteBatch(source uint32, partition int, firstTimestampNs int64, data []byte, fragments int) error {
	if w.err != nil {
		return w.err
	}
	if partition < 0 || partition > 0xffff {
		return fmt.Errorf("recording: partition %d out of range", partition)
	}
	var h [batchHeaderSize]byte
	binary.LittleEndian.PutUint32(h[0:], source)
	binary.LittleEndian.PutUint16(h[4:], uint16(partition))
	binary.LittleEndian.PutUint64(h[6:], uint64(firstTimestampNs))
	binary.LittleEndian.PutUint32(h[14:], uint32(fragments))
	binary.LittleEndian.PutUint32(h[18:], uint32(len(data)))
	w.raw = append(append(w.raw, h[:]...), data...)
	w.trailer.Batches++
	w.trailer.Fragments += uint64(fragments)
	if len(w.raw) >= w.target {
		return w.writeFrame(kindBatches, w.raw)
	}
	return nil
}

// AddCrossings counts crossings for the trailer.
func (w *Writer) AddCrossings(n uint64) { w.trailer.Crossings += n }

func (w *Writer) writeFrame(kind byte, raw []byte) error {
	if kind == kindBatches {
		// Truth goes out first, so that a reader has the truth of a
		// crossing before any of its fragments.
		if err := w.flushTruth(); err != nil {
			return err
		}
	}
	codec := byte(codecNone)
	stored := raw
	// Compress where it pays: keep the compressed form only if it saves at
	// least a quarter. Streams are replayed many times from the page
	// cache, where decompressing costs the reader far more than the bytes
	// it saves: for physics crossings at mu = 60, whose tower lists S2
	// shrinks by a sixth, decompression took 2 - 3.5 us of the replay's
	// 25-30 us of CPU per crossing, the extra fifth of bytes read almost
	// nothing (docs/report-format.md, "Performance").
	w.stored = s2.Encode(w.stored[:cap(w.stored)], raw)
	if len(w.stored) <= len(raw)-len(raw)/4 {
		codec, stored = codecS2, w.stored
	}
	var h [frameHeaderSize]byte
	h[0], h[1] = kind, codec
	binary.LittleEndian.PutUint32(h[2:], uint32(len(stored)))
	binary.LittleEndian.PutUint32(h[6:], uint32(len(raw)))
	binary.LittleEndian.PutUint32(h[10:], crc32.Checksum(stored, castagnoli))
	if _, err := w.w.Write(h[:]); err != nil {
		return fmt.Errorf("recording: %s: %w", w.path, err)
	}
	if _, err := w.w.Write(stored); err != nil {
		return fmt.Errorf("recording: %s: %w", w.path, err)
	}
	if kind == kindBatches {
		w.raw = w.raw[:0]
	}
	return nil
}

// Close writes the last frame and the trailer and closes the file. It is
// safe to call more than once.
func (w *Writer) Close() error {
	if w.closed {
		return nil
	}
	w.closed = true
	err := w.err
	if err == nil && len(w.raw) > 0 {
		err = w.writeFrame(kindBatches, w.raw)
	}
	if err == nil {
		err = w.flushTruth()
	}
	if err == nil {
		var tb []byte
		tb, err = proto.Marshal(&w.trailer)
		if err == nil {
			err = w.writeFrame(kindTrailer, tb)
		}
	}
	if err == nil {
		err = w.w.Flush()
	}
	if cerr := w.f.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("recording: %s: %w", w.path, cerr)
	}
	return err
}

// Trailer returns the counts written so far.
func (w *Writer) Trailer() *pb.StreamTrailer { return &w.trailer }
