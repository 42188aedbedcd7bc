package emulator

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
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

// nanos converts ns nanoseconds to a Duration, saturating: a wait beyond
// the int64 range (a tiny rate or speed over a long stream) is the
// longest Duration, not a wrapped-around negative one that would make
// every batch due at once.
func nanos(ns float64) time.Duration {
	switch {
	case ns >= math.MaxInt64:
		return math.MaxInt64
	case ns > 0:
		return time.Duration(ns)
	}
	return 0
}

// Pace says how fast Replay sends; the zero value sends as fast as
// possible.
type Pace struct {
	// RateHz, when positive, paces the replay at this many crossings per
	// second, evenly, whatever rate the emulator that made the stream ran
	// at: a batch is due when the ordinal of its first crossing among the
	// machine's colliding crossings (from its timestamp and the filling
	// scheme of the stream's detector description), counted from the
	// first batch's, is over RateHz.
	RateHz float64
	// Speed, when positive and RateHz is not, scales the crossings' own
	// timestamps: 1 replays them at the machine's own pace (tens of
	// millions of crossings a second, in trains and gaps, faster than any
	// publisher here, so as fast as possible in practice), 1e-4 at a
	// ten-thousandth of it.
	Speed float64
}

// Replay sends the batches of a recorded stream to sink at pace. Batches
// go out byte for byte as recorded, with only their publish time
// restamped: the new sent_unix_ns is appended as a second occurrence of
// the field, which protobuf decoders take over the first (last one wins
// for scalar fields), so no batch is decoded or re-encoded. On damage it
// returns a *recording.FormatError after sending every intact batch
// before it.
func Replay(ctx context.Context, r *recording.Reader, sink Sink, pace Pace) (ReplayStats, error) {
	var st ReplayStats
	var buf []byte
	start := time.Now()
	var t0 int64
	first := true
	var ord *crossingOrdinals
	if pace.RateHz > 0 {
		var err error
		if ord, err = newCrossingOrdinals(r.Header()); err != nil {
			return st, err
		}
	}
	var ord0 uint64
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
			if ord != nil {
				ord0 = ord.of(t0)
			}
		}
		var due time.Time
		switch {
		case ord != nil:
			n := ord.of(b.FirstTimestampNs)
			if n > ord0 {
				due = start.Add(nanos(float64(n-ord0) / pace.RateHz * float64(time.Second)))
			}
		case pace.Speed > 0:
			due = start.Add(nanos(float64(b.FirstTimestampNs-t0) / pace.Speed))
		}
		if wait := time.Until(due); !due.IsZero() && wait > 0 {
			t := time.NewTimer(wait)
			select {
			case <-ctx.Done():
				t.Stop()
				return st, ctx.Err()
			case <-t.C:
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

// crossingOrdinals numbers crossings from their timestamps: the n-th
// colliding crossing of the run (counting from 0) is n, as the generators
// number them (detector.FillingScheme.Crossing).
type crossingOrdinals struct {
	clock  detector.Clock
	before []uint64 // colliding bunches in the slots below each bcid
	nb     uint64
}

// newCrossingOrdinals reads the filling scheme of the stream's detector
// description (the built-in one if the header has none).
func newCrossingOrdinals(h *pb.StreamHeader) (*crossingOrdinals, error) {
	d := detector.DefaultDescription()
	if h.Detector != "" {
		var err error
		if d, err = detector.ParseDescription("stream header", []byte(h.Detector)); err != nil {
			return nil, fmt.Errorf("emulator: replay: %w", err)
		}
	}
	nb := d.Filling.Colliding()
	if nb == 0 {
		return nil, fmt.Errorf("emulator: replay: the stream's machine has no colliding crossings to pace by")
	}
	c := &crossingOrdinals{clock: detector.DefaultClock(), nb: uint64(nb)}
	filled := make([]bool, c.clock.Slots)
	for n := range uint64(nb) {
		_, bcid := d.Filling.Crossing(n)
		filled[bcid] = true
	}
	c.before = make([]uint64, c.clock.Slots)
	var k uint64
	for b := range filled {
		c.before[b] = k
		if filled[b] {
			k++
		}
	}
	return c, nil
}

// of returns the ordinal of the crossing at ts, taken to the nearest slot
// (a clock skew of a few ns moves nothing).
func (c *crossingOrdinals) of(ts int64) uint64 {
	slot := int64(math.Round((float64(ts) - c.clock.PhaseNs) / c.clock.SlotNs))
	if slot < 0 {
		slot = 0
	}
	slots := int64(c.clock.Slots)
	return uint64(slot/slots)*c.nb + c.before[slot%slots]
}
