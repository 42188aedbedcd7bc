// Package replay runs recorded or generated crossings through the event
// builder and the selection in-process, without NATS, for the offline
// rates and efficiency report.
//
// A stream file replays on lanes (lanes.go): each lane reads the whole
// file, runs a builder.Builder of its own over every fragment, decodes in
// full and decides only the events of its own share of the crossings,
// and the calling goroutine merges the lanes' events in the order the
// builders emitted them and hands each to the caller's sink. A
// calorimeter fragment in the readout's canonical layout is decoded,
// checksummed and reduced to the towers the selection sees in one pass
// over its packed lists (fuse.go). A detector generator feeds one
// builder, whose events are gathered into chunks for a fixed number of
// workers (pipeline.go). Either way the towers and muon hits of an event
// are decoded as services/selector.FillEvent does and its features
// computed for every menu; prescales are applied by the calling goroutine
// in emission order. Because prescale counters see the events in that
// order, and because nothing depends on timing or the number of lanes or
// workers, the same input gives the same decisions, bit for bit.
package replay
