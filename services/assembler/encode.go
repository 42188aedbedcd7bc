package assembler

import (
	"google.golang.org/protobuf/encoding/protowire"

	"github.com/bunchsieve/bunchsieve/builder"
)

// Encoding event batches by hand. A built event is mostly its fragments,
// and those are carried as the bytes they arrived in, each behind its
// field tag, so no fragment is encoded twice. Fields are written in field
// number order with proto3's implicit presence (zero values left out),
// exactly as proto.Marshal writes them; a test compares the two byte for
// byte.

// Field numbers of EventBatch and BuiltEvent
// (proto/bunchsieve/v1/event.proto).
const (
	ebBuilder  = 1
	ebSequence = 2
	ebEvents   = 3
	ebEnd      = 4
	ebTotal    = 5

	evRun       = 1
	evOrbit     = 2
	evBcid      = 3
	evTimestamp = 4
	evLumi      = 5
	evFragments = 6
	evMissing   = 7
	evFlags     = 8
	evReadout   = 9
	evBuilt     = 10
)

// batchHeadRoom is the room kept in front of a batch's events for its
// builder and sequence fields, which are known only when it is published:
// two one-byte tags, a uint32 and a uint64 varint.
const batchHeadRoom = 2 + 5 + 10

// builtEvent is what the encoder needs of one event besides the builder's
// Event: its fragments' bytes in the Event's order.
type builtEvent struct {
	ev      *builder.Event
	lumi    uint32
	raws    [][]byte
	builtNs int64
}

func sizeVarintField(v uint64) int {
	if v == 0 {
		return 0
	}
	return 1 + protowire.SizeVarint(v)
}

// size returns the length of the BuiltEvent encoding.
func (e *builtEvent) size() int {
	ev := e.ev
	n := sizeVarintField(uint64(ev.Run)) + sizeVarintField(ev.Orbit) + sizeVarintField(uint64(ev.Bcid)) +
		sizeVarintField(uint64(ev.TimestampNs)) + sizeVarintField(uint64(e.lumi))
	for _, r := range e.raws {
		n += 1 + protowire.SizeBytes(len(r))
	}
	if m := packedSize(ev.Missing); m > 0 {
		n += 1 + protowire.SizeBytes(m)
	}
	return n + sizeVarintField(uint64(ev.Flags)) + sizeVarintField(uint64(ev.EarliestSentNs)) + sizeVarintField(uint64(e.builtNs))
}

func packedSize(vs []uint32) int {
	n := 0
	for _, v := range vs {
		n += protowire.SizeVarint(uint64(v))
	}
	return n
}

func appendVarintField(b []byte, num protowire.Number, v uint64) []byte {
	if v == 0 {
		return b
	}
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}

// appendTo appends the event as field 3 of an EventBatch.
func (e *builtEvent) appendTo(b []byte) []byte {
	ev := e.ev
	b = protowire.AppendTag(b, ebEvents, protowire.BytesType)
	b = protowire.AppendVarint(b, uint64(e.size()))
	b = appendVarintField(b, evRun, uint64(ev.Run))
	b = appendVarintField(b, evOrbit, ev.Orbit)
	b = appendVarintField(b, evBcid, uint64(ev.Bcid))
	b = appendVarintField(b, evTimestamp, uint64(ev.TimestampNs))
	b = appendVarintField(b, evLumi, uint64(e.lumi))
	for _, r := range e.raws {
		b = protowire.AppendTag(b, evFragments, protowire.BytesType)
		b = protowire.AppendBytes(b, r)
	}
	if m := packedSize(ev.Missing); m > 0 {
		b = protowire.AppendTag(b, evMissing, protowire.BytesType)
		b = protowire.AppendVarint(b, uint64(m))
		for _, v := range ev.Missing {
			b = protowire.AppendVarint(b, uint64(v))
		}
	}
	b = appendVarintField(b, evFlags, uint64(ev.Flags))
	b = appendVarintField(b, evReadout, uint64(ev.EarliestSentNs))
	return appendVarintField(b, evBuilt, uint64(e.builtNs))
}

// batchHead returns the builder and sequence fields of a batch, to go in
// front of its events.
func batchHead(dst []byte, builder uint32, seq uint64) []byte {
	dst = appendVarintField(dst, ebBuilder, uint64(builder))
	return appendVarintField(dst, ebSequence, seq)
}

// appendBatchTail appends the end-of-run fields of a batch.
func appendBatchTail(b []byte, end bool, total uint64) []byte {
	if end {
		b = protowire.AppendTag(b, ebEnd, protowire.VarintType)
		b = protowire.AppendVarint(b, 1)
	}
	return appendVarintField(b, ebTotal, total)
}
