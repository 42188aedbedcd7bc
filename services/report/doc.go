// Package report builds the offline rates and efficiency report of a
// menu: per-rule rates before and after prescale with their errors, unique
// and cumulative rates, the overlap of rules, rate-versus-threshold scans,
// turn-on curves with Clopper-Pearson intervals and an error-function fit,
// a side-by-side comparison with another menu, and a linear scaling to
// another luminosity where that is valid.
//
// Run replays a source (package replay), counts what the report needs as
// the events go by and returns a Report, which writes a terminal table,
// report.json (a versioned schema, docs/report-format.md), rates.csv,
// PNG and SVG plots and report.root (histograms and a per-event tree,
// readable with ROOT and go-hep's groot).
//
// Every number comes from the models and the sample replayed: in the
// demo scenario (the invented Lantern detector at the invented Meridian
// ring) they describe nothing real. The report says so in its own text.
package report
