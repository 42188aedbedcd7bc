// Package trigger is the selection library: it computes the features of a
// built event once (missing transverse energy, scalar sums, and object
// collections: sliding-window and anti-kt jets, electromagnetic clusters
// with isolation, muon candidates, narrow clusters), evaluates the rules
// of a menu on them, applies counter-based prescales and records the
// decision.
//
// The package is pure: it does no input or output besides reading a menu
// file in LoadMenu, and it never reads the wall clock. Time enters only as the
// lumi slice number carried by each event, so a replay of the same events
// gives the same decisions.
//
// The pieces, in the order an event meets them:
//
//   - Event, Tower, MuonHit and Grid describe the input (filled by the
//     service from built events; the geometry and the solenoid field are
//     passed in).
//   - ComputeFeatures fills a Features value: MET, sum ET and one Collection
//     per configured object algorithm. Algorithms are plug-ins found by name
//     in a Registry; RegisterStandard adds this package's (window, antikt,
//     em-cluster, muon-road, narrow-cluster). AntiKt and FitMuonTrack are
//     the clustering and the track fit on their own, for other uses.
//   - ParseMenu reads a menu (docs/menu.md describes the language) and
//     compiles every rule's condition once, checked for names, types and
//     units at load time.
//   - A Selector applies a Menu to events: Decide fills a Decision with the
//     per-rule results before and after prescale, the accept flag and the
//     streams; SetPrescaleSet switches prescale sets at a lumi-slice boundary.
package trigger
