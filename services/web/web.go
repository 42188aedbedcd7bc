// Package web is the operator page: a live view of one run (phase, lumi
// slice, prescale set, total and per-rule accept rates with a short
// history, build latency, source health, incomplete fraction), served over
// HTTP with every asset embedded, so that it works on a machine without
// network access.
//
// The package defines the data contract between the page and whatever
// runs the chain: the producer implements Source, returning a Snapshot on
// each call, and mounts Handler. The page polls /api/status once a second
// and keeps the history itself; rates in the Snapshot are the producer's.
package web

import (
	"embed"
	"encoding/json"
	"io/fs"
	"math"
	"net/http"
)

// Run phases, in the run-control's words. The page colours these; any
// other phase text is shown as it is, in a neutral colour.
const (
	PhaseIdle     = "idle"     // nothing configured
	PhaseReady    = "ready"    // configured, not started
	PhaseFlowing  = "flowing"  // crossings are being offered
	PhaseDraining = "draining" // offering stopped, in-flight crossings finishing
	PhaseFaulted  = "faulted"  // stopped after a failure; see Detail
)

// Snapshot is the state of a run at one moment, as the page shows it and as
// /api/status serves it in JSON. Rates are per second over whatever recent
// interval the producer chooses (one status interval is natural); counts
// are totals since the run started. Non-finite numbers are served as 0.
type Snapshot struct {
	// Phase is the run phase, one of the Phase constants.
	Phase string `json:"phase"`
	// Detail explains the phase, e.g. the failure when faulted; may be "".
	Detail string `json:"detail,omitempty"`
	Run    uint32 `json:"run"`
	// LumiSlice is the newest lumi slice decided.
	LumiSlice uint32 `json:"lumi_slice"`
	// PrescaleSet is the prescale set in force for LumiSlice.
	PrescaleSet string `json:"prescale_set"`
	Menu        string `json:"menu"`
	MenuHash    string `json:"menu_hash"`
	// UptimeS is the time since the run started flowing, in seconds.
	UptimeS float64 `json:"uptime_s"`

	CrossingsHz float64 `json:"crossings_hz"` // crossings offered by the readout
	BuiltHz     float64 `json:"built_hz"`     // events emitted by the builder
	AcceptedHz  float64 `json:"accepted_hz"`  // events accepted by the menu
	// IncompleteFraction is the fraction (0..1) of recently built events
	// that were incomplete.
	IncompleteFraction float64 `json:"incomplete_fraction"`

	// Build latency percentiles (first fragment in to event out), seconds.
	BuildLatencyP50S float64 `json:"build_latency_p50_s"`
	BuildLatencyP90S float64 `json:"build_latency_p90_s"`
	BuildLatencyP99S float64 `json:"build_latency_p99_s"`
	// EndToEndP99S is the 99th percentile of readout publish to decision.
	EndToEndP99S float64 `json:"end_to_end_p99_s"`

	// Rules are the menu's rules in menu order; never null in JSON.
	Rules []RuleStatus `json:"rules"`
	// Sources are the expected readout sources; never null in JSON.
	Sources []SourceHealth `json:"sources"`
}

// RuleStatus is one rule of the menu.
type RuleStatus struct {
	Name string `json:"name"`
	// Prescale is the prescale in force; 0 means the rule is off.
	Prescale   int     `json:"prescale"`
	PassedHz   float64 `json:"passed_hz"`   // before prescale
	AcceptedHz float64 `json:"accepted_hz"` // after prescale
	Passed     uint64  `json:"passed"`
	Accepted   uint64  `json:"accepted"`
}

// SourceHealth is one readout source as the event builder sees it.
type SourceHealth struct {
	ID uint32 `json:"id"`
	// Alive is false once the source has been silent past the builder's
	// dead-source timeout.
	Alive bool `json:"alive"`
	// Received counts fragments offered to the builder; Discarded those not
	// used in an event (duplicate, late, malformed, out of time).
	Received  uint64 `json:"received"`
	Discarded uint64 `json:"discarded"`
}

// Source produces the snapshots the page shows. Snapshot is called once per
// /api/status request, from any goroutine, so it must be safe for
// concurrent use and should return quickly.
type Source interface {
	Snapshot() Snapshot
}

// SourceFunc adapts a function to Source.
type SourceFunc func() Snapshot

// Snapshot calls f.
func (f SourceFunc) Snapshot() Snapshot { return f() }

//go:embed assets
var assets embed.FS

// contentPolicy allows the page nothing from outside its own origin.
const contentPolicy = "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; " +
	"connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'"

// Handler returns the operator page for src: the page at /, its status JSON
// at /api/status and the embedded assets under /assets/. Other paths are
// 404 and methods other than GET and HEAD 405. The page uses relative URLs,
// so the handler can also be mounted under a prefix with
// http.StripPrefix. It panics if src is nil.
func Handler(src Source) http.Handler {
	if src == nil {
		panic("web: Handler with a nil Source")
	}
	static, err := fs.Sub(assets, "assets")
	if err != nil {
		panic("web: embedded assets missing: " + err.Error())
	}
	index, err := fs.ReadFile(static, "index.html")
	if err != nil {
		panic("web: embedded index.html missing: " + err.Error())
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /{$}", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.Header().Set("Cache-Control", "no-cache")
		_, _ = w.Write(index)
	})
	mux.HandleFunc("GET /api/status", func(w http.ResponseWriter, r *http.Request) {
		body, err := json.Marshal(clean(src.Snapshot()))
		if err != nil {
			http.Error(w, "web: encode status: "+err.Error(), http.StatusInternalServerError)
			return
		}
		w.Header().Set("Content-Type", "application/json")
		w.Header().Set("Cache-Control", "no-store")
		_, _ = w.Write(append(body, '\n'))
	})
	files := http.FileServerFS(static)
	mux.Handle("GET /assets/", http.StripPrefix("/assets", http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Cache-Control", "no-cache")
		files.ServeHTTP(w, r)
	})))
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Security-Policy", contentPolicy)
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "no-referrer")
		mux.ServeHTTP(w, r)
	})
}

// clean makes s encodable and its lists non-null.
func clean(s Snapshot) Snapshot {
	for _, f := range []*float64{&s.UptimeS, &s.CrossingsHz, &s.BuiltHz, &s.AcceptedHz, &s.IncompleteFraction,
		&s.BuildLatencyP50S, &s.BuildLatencyP90S, &s.BuildLatencyP99S, &s.EndToEndP99S} {
		*f = finite(*f)
	}
	rules := make([]RuleStatus, len(s.Rules))
	for i, r := range s.Rules {
		r.PassedHz, r.AcceptedHz = finite(r.PassedHz), finite(r.AcceptedHz)
		rules[i] = r
	}
	s.Rules = rules
	if s.Sources == nil {
		s.Sources = []SourceHealth{}
	}
	return s
}

func finite(x float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0
	}
	return x
}
