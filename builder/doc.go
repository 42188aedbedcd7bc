// Package builder assembles detector fragments into events, one event per
// bunch crossing.
//
// The library is pure and deterministic: it starts no goroutines, reads no
// clock and does no I/O. Time comes in with every call, in two kinds:
// event time (a fragment's timestamp, ns from run start) decides when a
// crossing is complete enough; arrival time (when a fragment reached the
// builder, on whatever clock the caller uses) decides when a source is
// dead. The same input therefore gives the same events, in replays and in
// tests.
//
// # Crossings
//
// A crossing is keyed by its absolute slot index orbit*Slots+bcid in the
// configured run. In ByCounter mode the fragment's counters give the key
// and a non-zero timestamp must lie within Tolerance of the crossing's
// nominal time (detector.Clock.Nominal); a zero timestamp means the source
// does not stamp and is not checked. In ByTimestamp mode the timestamp
// gives the key: the fragment joins the slot whose nominal time is nearest,
// if within Tolerance; a timestamp between slots is out of time, and one a
// millisecond off lands in the crossing a millisecond away, never in this
// one. Non-zero counters are then checked against that slot.
//
// The event time of a valid fragment is the nominal time of its crossing,
// which agrees with its timestamp within Tolerance.
//
// # Where every fragment ends
//
// Each fragment offered to Add ends in exactly one of: an emitted event
// (or, until then, an open crossing), duplicate, late, malformed, unknown
// source, out of time. Checks run in this order and the first failure
// decides: checksum, run (both malformed), source (unknown source),
// counter range (malformed), time (out of time); then duplicate (the
// source already reported the crossing, open or emitted) or late (the
// crossing has been emitted without this source, or the watermark passed
// it by more than the lateness). Counts are kept in total and per source;
// Stats.Balanced checks the sum. With policy Block a fragment can also be
// refused (ErrWindowFull): it is not consumed and not counted as received.
//
// # When a crossing is emitted
//
// A crossing is emitted complete the moment its last expected source
// reports. Otherwise event-time watermarks decide (T. Akidau et al., "The
// Dataflow Model", PVLDB 8(12) 2015): a source's watermark is the largest
// event time it has sent, the global watermark is the minimum over live
// sources, and a crossing at time t is emitted incomplete, listing its
// missing sources, once the global watermark exceeds t+Lateness. The
// resulting closing time only moves forward, so no crossing is emitted
// twice: an emitted crossing is remembered until the closing time passes
// it, and a fragment for it, or for anything before the closing time,
// is duplicate or late, never a new crossing.
//
// A source that has sent no valid fragment for more than DeadAfter of
// arrival time (counted from the first call for a source that never
// sent) is dead: it leaves the watermark, so it cannot stall the run, and
// the events go on, incomplete, naming it. It is alive again with its next
// valid fragment. When no source is alive at all, nothing can move the
// watermark, so every open crossing is emitted incomplete at once.
//
// # Bounded memory
//
// At most Window crossings are tracked, open and remembered together.
// When a fragment needs a new crossing and the window is full, an
// emitted crossing that is the oldest tracked is simply forgotten.
// Otherwise policy EvictOldest emits the oldest open crossing at once,
// incomplete and flagged EVICTED (the new crossing itself, if it is the
// oldest); policy Block refuses the fragment with ErrWindowFull and the
// caller offers it again later (after Advance or other fragments, or after
// Evict). A refused fragment keeps a live source alive but does not move
// its watermark. Either way the closing time moves
// past what was dropped from the window. All memory is allocated by New;
// Add allocates nothing for an accepted fragment, only the error value of
// a rejected one.
//
// # Use
//
// A Builder is not safe for concurrent use; one goroutine owns it, and
// builders scale out by owning shares of the crossings (Partition). The
// Event passed to the emit callback, with its slices, is valid only during
// the callback; its fragments are sorted by source id. The callback must
// not call the Builder. A caller that verifies checksums on goroutines of
// its own hands the outcome to AddChecked, and the one goroutine owning
// the Builder only builds.
package builder
