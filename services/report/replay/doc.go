// Package replay runs recorded or generated crossings through the event
// builder and the selection in-process, without NATS, for the offline
// rates and efficiency report.
//
// A Source (a stream file, or a detector generator) yields fragments; one
// goroutine feeds them to a builder.Builder, whose emitted events are
// gathered into chunks; a fixed number of workers decode the towers and
// muon hits of each event (as services/selector.FillEvent does) and
// compute its features for every menu; one goroutine then decides the
// events in the order the builder emitted them and hands each to the
// caller's sink. A stream is read ahead of the feeding goroutine: one
// goroutine reads and decompresses the file, and as many goroutines as
// workers decode its fragment batches and verify every fragment's
// checksum, so that the feeder only builds (builder.Builder.AddChecked);
// a calorimeter fragment in the readout's canonical layout is decoded,
// checksummed and reduced to the towers the selection sees in one pass
// over its packed lists (fuse.go).
// Because prescale counters see the events in that order, and because
// nothing depends on timing or the number of workers, the same input gives
// the same decisions, bit for bit.
package replay
