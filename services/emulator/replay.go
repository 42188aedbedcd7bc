package emulator

import (
	"context"
	"errors"
	"fmt"
	"io"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// ReplayStats counts what a replay sent.
type ReplayStats struct {
	Batches, Fragments uint64
	// Crossings is the trailer's count, or zero when the file had no
	// intact trailer.
	Crossings uint64
}

// sentField is the FragmentBatch field number of sent_unix_ns.
const sentField = 4

// Replay sends the batches of a recorded stream to sink. speed scales real
// time (1 = as recorded, 2 = twice as fast); zero or less sends as fast as
// possible. Batches go out byte for byte as recorded, with only their
// publish time restamped: the new sent_unix_ns is appended as a second
// occurrence of the field, which protobuf decoders take over the first
// (last one wins for scalar fields), so no batch is decoded or re-encoded.
// On damage it returns a *recording.FormatError after sending every intact
// batch before it.
func Replay(ctx context.Context, r *recording.Reader, sink Sink, speed float64) (ReplayStats, error) {
	var st ReplayStats
	var buf []byte
	start := time.Now()
	var t0 int64
	first := true
	for {
		if st.Batches%64 == 0 && ctx.Err() != nil {
			return st, ctx.Err()
		}
		b, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			// The stream is damaged: end the run for every source, so the
			// builder emits what it has instead of waiting for markers that
			// will never come.
			return st, errors.Join(err, endRun(r, sink))
		}
		if first {
			t0, first = b.FirstTimestampNs, false
		}
		if speed > 0 {
			due := start.Add(time.Duration(float64(b.FirstTimestampNs-t0) / speed))
			if wait := time.Until(due); wait > 0 {
				t := time.NewTimer(wait)
				select {
				case <-ctx.Done():
					t.Stop()
					return st, ctx.Err()
				case <-t.C:
				}
			}
		}
		buf = append(buf[:0], b.Data...)
		buf = protowire.AppendTag(buf, sentField, protowire.VarintType)
		buf = protowire.AppendVarint(buf, uint64(time.Now().UnixNano()))
		if err := sink.Send(b.Partition, b.SourceID, b.FirstTimestampNs, buf, b.Fragments); err != nil {
			return st, err
		}
		st.Batches++
		st.Fragments += uint64(b.Fragments)
	}
	if t := r.Trailer(); t != nil {
		st.Crossings = t.Crossings
	}
	if err := sink.Flush(); err != nil {
		return st, fmt.Errorf("emulator: replay: %w", err)
	}
	return st, nil
}

// endRun sends an end-of-run marker for every source and builder share of
// the stream's header.
func endRun(r *recording.Reader, sink Sink) error {
	h := r.Header()
	parts := max(int(h.Partitions), 1)
	for p := 0; p < parts; p++ {
		for _, id := range h.SourceIds {
			data, err := proto.Marshal(&pb.FragmentBatch{SourceId: id, Run: h.Run, EndOfRun: true, SentUnixNs: time.Now().UnixNano()})
			if err != nil {
				return fmt.Errorf("emulator: encode end of run: %w", err)
			}
			if err := sink.Send(p, id, 0, data, 0); err != nil {
				return err
			}
		}
	}
	return sink.Flush()
}
