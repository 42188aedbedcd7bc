package loadtest

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/bunchsieve/bunchsieve/services/telemetry"
)

// SchemaVersion names the layout of the JSON report. It changes when a
// field changes meaning or goes away; new fields may appear without it.
const SchemaVersion = "bunchsieve-loadtest/1"

// Report is the outcome of a load test: every step, the raw-transport
// baselines and the saturation point. Its JSON field names are a contract
// (docs/performance.md describes them).
type Report struct {
	Schema    string    `json:"schema"`
	StartedAt time.Time `json:"started_at"`
	// Command is the command line that made the report, when known.
	Command   string      `json:"command,omitempty"`
	Machine   Machine     `json:"machine"`
	Transport string      `json:"transport"`
	Dataset   DatasetInfo `json:"dataset"`
	Builders  int         `json:"builders"`
	Workers   int         `json:"workers"`
	Menu      string      `json:"menu"`
	MenuHash  string      `json:"menu_hash"`
	// P99BoundMs is the latency bound a step must meet to count as keeping
	// up.
	P99BoundMs float64 `json:"p99_bound_ms"`
	// Capture says every step's fragment batches were also stored in a
	// JetStream stream (Config.Capture; Accounting.Capture has the counts).
	Capture bool   `json:"capture"`
	Steps   []Step `json:"steps"`
	// Saturation is the passing step of highest offered rate, nil if none
	// passed.
	Saturation *Step `json:"saturation"`
	// FailedBelow lists the offered rates of the fixed-rate steps at or
	// below Saturation's rate that failed, nil if none did. A step failing below one
	// that passed says the conditions changed while the test ran (on a
	// shared machine, the host's speed): Saturation is then the best
	// moment's figure, and SteadyHz, the highest passing rate with every
	// step up to it passing too (0 if none), the figure to rely on; nil
	// when FailedBelow is, so that the JSON tells "none" from "not
	// needed".
	FailedBelow []float64 `json:"failed_below_saturation,omitempty"`
	SteadyHz    *float64  `json:"steady_hz,omitempty"`
	// Baseline is the offered messages through the same NATS with no
	// processing; Relay adds the second hop the built events take.
	Baseline *Baseline `json:"baseline,omitempty"`
	Relay    *Baseline `json:"relay_baseline,omitempty"`
	// Ratio is the saturation throughput over the baseline's, in
	// crossings per second; RelayRatio the same over the relay baseline.
	Ratio      float64 `json:"ratio,omitempty"`
	RelayRatio float64 `json:"relay_ratio,omitempty"`
	// PeakRSSBytes is the process's peak resident set over the whole test,
	// dataset included.
	PeakRSSBytes uint64 `json:"peak_rss_bytes"`
}

// Machine describes where the test ran.
type Machine struct {
	CPUs       int    `json:"cpus"`
	GOMAXPROCS int    `json:"gomaxprocs"`
	OS         string `json:"os"`
	Arch       string `json:"arch"`
	Go         string `json:"go"`
	Hostname   string `json:"hostname,omitempty"`
	// GOGC is the garbage collector's setting during the test (-1: off).
	GOGC int `json:"gogc"`
	// AvailableCoresBefore and AvailableCoresAfter are the CPU time a
	// one-second spin of GOMAXPROCS goroutines got per second of wall
	// time before and after the test: on a shared machine, how much of it
	// the test could have had.
	AvailableCoresBefore float64 `json:"available_cores_before"`
	AvailableCoresAfter  float64 `json:"available_cores_after"`
}

// DatasetInfo describes the replayed stream.
type DatasetInfo struct {
	Origin             string  `json:"origin"`
	Crossings          uint64  `json:"crossings"`
	Sources            int     `json:"sources"`
	Partitions         int     `json:"partitions"`
	Batches            int     `json:"batches"`
	Fragments          uint64  `json:"fragments"`
	Bytes              int64   `json:"bytes"`
	MeanBatchBytes     float64 `json:"mean_batch_bytes"`
	MeanCrossingBytes  float64 `json:"mean_crossing_bytes"`
	PreparationSeconds float64 `json:"preparation_s"`
}

// Step is one offered rate.
type Step struct {
	// OfferedHz is the requested crossing rate, 0 for as fast as possible;
	// AchievedOfferHz what the feed managed (crossings over the publishing
	// time).
	OfferedHz       float64 `json:"offered_hz"`
	AchievedOfferHz float64 `json:"achieved_offer_hz"`
	// DurationS runs from the first publish to the last decision.
	DurationS float64 `json:"duration_s"`
	// Throughput: decided events, their fragments and the fragment batch
	// bytes per second of DurationS.
	EventsPerS    float64 `json:"events_per_s"`
	FragmentsPerS float64 `json:"fragments_per_s"`
	MBPerS        float64 `json:"mb_per_s"`
	// CrossingsPlanned is how many crossings the step was to offer (the
	// feed offers whole batches, so up to one batch's worth fewer).
	CrossingsPlanned uint64 `json:"crossings_planned"`
	// FeedBehindMs is the most the feed fell behind its schedule at a fixed
	// rate, beyond its tick; a step fails when it exceeds the p99 bound.
	FeedBehindMs float64 `json:"feed_behind_ms"`
	// Laps is how many passes over the dataset the step took.
	Laps    uint64     `json:"laps"`
	Latency LatencyMs  `json:"latency_ms"`
	CPU     CPUUse     `json:"cpu"`
	Memory  MemoryUse  `json:"memory"`
	Account Accounting `json:"accounting"`
	// Pass is true when nothing was lost and p99 met the bound.
	Pass   bool   `json:"pass"`
	Reason string `json:"reason,omitempty"`
	Error  string `json:"error,omitempty"`
}

// LatencyMs holds end-to-end latency quantiles in ms: from the readout
// publishing a crossing's first fragment batch to the crossing's decision.
type LatencyMs struct {
	Count uint64  `json:"count"`
	P50   float64 `json:"p50"`
	P90   float64 `json:"p90"`
	P99   float64 `json:"p99"`
	P999  float64 `json:"p999"`
	Max   float64 `json:"max"`
}

func latencyOf(l *telemetry.Latency) LatencyMs {
	ms := func(d time.Duration) float64 { return d.Seconds() * 1e3 }
	return LatencyMs{Count: l.Count(), P50: ms(l.Quantile(0.5)), P90: ms(l.Quantile(0.9)), P99: ms(l.Quantile(0.99)),
		P999: ms(l.Quantile(0.999)), Max: ms(l.Max())}
}

// CPUUse is the process CPU time over a step (getrusage).
type CPUUse struct {
	UserS float64 `json:"user_s"`
	SysS  float64 `json:"sys_s"`
	// Cores is CPU time over wall time; MicrosPerEvent CPU time per
	// decided event.
	Cores          float64 `json:"cores"`
	MicrosPerEvent float64 `json:"us_per_event"`
}

// MemoryUse is the peak of the memory samples of a step.
type MemoryUse struct {
	PeakHeapBytes  uint64 `json:"peak_heap_bytes"`
	PeakTotalBytes uint64 `json:"peak_total_bytes"`
	// PeakRSSBytes is the largest resident set sampled during the step;
	// MaxRSSBytes the process's high-water mark at its end, which may
	// come from before it.
	PeakRSSBytes uint64         `json:"peak_rss_bytes"`
	MaxRSSBytes  uint64         `json:"max_rss_bytes"`
	Samples      []MemorySample `json:"samples,omitempty"`
	// Flatness is set for runs whose samples were kept and that last
	// longer than a minute.
	Flatness *Flatness `json:"flatness,omitempty"`
}

// Accounting is the conservation of a step: every crossing offered is
// built once and decided once, every fragment is in an event, nothing is
// dropped.
type Accounting struct {
	CrossingsOffered           uint64 `json:"crossings_offered"`
	BatchesOffered             uint64 `json:"batches_offered"`
	FragmentsOffered           uint64 `json:"fragments_offered"`
	FragmentsReceived          uint64 `json:"fragments_received"`
	FragmentsInEvents          uint64 `json:"fragments_in_events"`
	FragmentsDiscarded         uint64 `json:"fragments_discarded"`
	EventsBuilt                uint64 `json:"events_built"`
	EventsComplete             uint64 `json:"events_complete"`
	EventsIncomplete           uint64 `json:"events_incomplete"`
	EventsDecided              uint64 `json:"events_decided"`
	EventsLost                 uint64 `json:"events_lost"`
	Accepted                   uint64 `json:"accepted"`
	FragmentBatchesDropped     uint64 `json:"fragment_batches_dropped"`
	EventBatchesDropped        uint64 `json:"event_batches_dropped"`
	FragmentBatchesUndecodable uint64 `json:"fragment_batches_undecodable"`
	EventBatchesUndecodable    uint64 `json:"event_batches_undecodable"`
	// BuiltBy and DecidedBy are the events each builder built and each
	// worker decided, by instance and worker number.
	BuiltBy   []uint64    `json:"built_by"`
	DecidedBy []uint64    `json:"decided_by"`
	Rules     []RuleCount `json:"rules"`
	// Capture counts the durable capture's batches (Config.Capture); nil
	// without it.
	Capture *CaptureCount `json:"capture,omitempty"`
}

// CaptureCount is what the capture stream of a step stored of the
// fragment batches published, end-of-run batches included.
type CaptureCount struct {
	Published uint64 `json:"published"`
	Stored    uint64 `json:"stored"`
}

// RuleCount is one rule's counts summed over the workers. Each worker
// prescales its own share, so with several workers Kept may fall short of
// floor(Passed/Prescale) by up to one per worker.
type RuleCount struct {
	Name     string `json:"name"`
	Prescale int    `json:"prescale"`
	Passed   uint64 `json:"passed"`
	Kept     uint64 `json:"kept"`
}

// Lossless reports whether the accounting closed with nothing lost.
func (a Accounting) Lossless() bool {
	return a.EventsLost == 0 && a.EventsDecided == a.CrossingsOffered && a.EventsBuilt == a.CrossingsOffered &&
		a.EventsIncomplete == 0 && a.FragmentsReceived == a.FragmentsOffered && a.FragmentsInEvents == a.FragmentsOffered &&
		a.FragmentBatchesDropped == 0 && a.EventBatchesDropped == 0 &&
		a.FragmentBatchesUndecodable == 0 && a.EventBatchesUndecodable == 0 &&
		(a.Capture == nil || a.Capture.Stored == a.Capture.Published)
}

// Baseline is the raw-transport ceiling: the dataset's batches published
// and received through the same NATS, over the same kind of connection,
// with no processing.
type Baseline struct {
	// Hops is 1 for the offered messages alone; 2 when a relay per share
	// republishes them in batches the size of the builder's (the traffic
	// of the built events).
	Hops          int     `json:"hops"`
	Crossings     uint64  `json:"crossings"`
	Messages      uint64  `json:"messages"`
	Bytes         int64   `json:"bytes"`
	DurationS     float64 `json:"duration_s"`
	CrossingsPerS float64 `json:"crossings_per_s"`
	MessagesPerS  float64 `json:"messages_per_s"`
	MBPerS        float64 `json:"mb_per_s"`
	Dropped       uint64  `json:"dropped"`
	CPU           CPUUse  `json:"cpu"`
	// Runs is how many times it was measured; the figures are of the
	// fastest run, Min* of the slowest.
	Runs             int     `json:"runs"`
	MinCrossingsPerS float64 `json:"min_crossings_per_s"`
}

// WriteJSON writes the report to path, indented.
func (r *Report) WriteJSON(path string) error {
	data, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return fmt.Errorf("loadtest: %w", err)
	}
	if err := os.WriteFile(path, append(data, '\n'), 0o644); err != nil {
		return fmt.Errorf("loadtest: %w", err)
	}
	return nil
}

// Print writes the report as tables.
func (r *Report) Print(w io.Writer) {
	d := r.Dataset
	m := r.Machine
	fmt.Fprintf(w, "load test %s on %d CPUs (GOMAXPROCS %d), %s/%s, %s, GOGC %d; cores available to a spin test: %.2f before, %.2f after\n",
		r.StartedAt.Format(time.RFC3339), m.CPUs, m.GOMAXPROCS, m.OS, m.Arch, m.Go, m.GOGC, m.AvailableCoresBefore, m.AvailableCoresAfter)
	capture := ""
	if r.Capture {
		capture = "; every step's fragment batches stored by a JetStream capture (file storage)"
	}
	fmt.Fprintf(w, "transport %s; %d builder(s), %d selection worker(s); menu %s%s\n", r.Transport, r.Builders, r.Workers, r.Menu, capture)
	fmt.Fprintf(w, "dataset %s: %d crossings x %d sources, %d batches, %.0f B/batch, %.0f B/crossing (prepared in %.1f s, not measured)\n\n",
		d.Origin, d.Crossings, d.Sources, d.Batches, d.MeanBatchBytes, d.MeanCrossingBytes, d.PreparationSeconds)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "offered/s\tachieved/s\tevents/s\tfragments/s\tMB/s\tp50 ms\tp90 ms\tp99 ms\tp99.9 ms\tcores\tus/event\tpeak heap MB\tlost\tdropped\tpass\t")
	for _, s := range r.Steps {
		offered := "max"
		if s.OfferedHz > 0 {
			offered = fmt.Sprintf("%.0f", s.OfferedHz)
		}
		pass := "yes"
		if !s.Pass {
			pass = "no: " + s.Reason
		}
		fmt.Fprintf(tw, "%s\t%.0f\t%.0f\t%.0f\t%.1f\t%.2f\t%.2f\t%.2f\t%.2f\t%.2f\t%.1f\t%.0f\t%d\t%d\t%s\t\n",
			offered, s.AchievedOfferHz, s.EventsPerS, s.FragmentsPerS, s.MBPerS, s.Latency.P50, s.Latency.P90, s.Latency.P99, s.Latency.P999,
			s.CPU.Cores, s.CPU.MicrosPerEvent, float64(s.Memory.PeakHeapBytes)/(1<<20), s.Account.EventsLost,
			s.Account.FragmentBatchesDropped+s.Account.EventBatchesDropped, pass)
	}
	tw.Flush()
	for _, s := range r.Steps {
		if f := s.Memory.Flatness; f != nil {
			mb := func(b uint64) float64 { return float64(b) / (1 << 20) }
			fmt.Fprintf(w, "memory at %.0f/s over %.0f s: runtime %.0f MB in the first minute, %.0f MB at most (x%.3f); resident %.0f MB, %.0f MB at most (x%.3f)\n",
				s.OfferedHz, s.DurationS, mb(f.FirstTotalBytes), mb(f.PeakTotalBytes), f.TotalGrowth, mb(f.FirstRSSBytes), mb(f.PeakRSSBytes), f.RSSGrowth)
		}
	}
	fmt.Fprintln(w)
	for _, b := range []*Baseline{r.Baseline, r.Relay} {
		if b == nil {
			continue
		}
		fmt.Fprintf(w, "raw transport, %d hop(s): %.0f crossings/s (%.0f msgs/s, %.1f MB/s; slowest of %d runs %.0f crossings/s), %d dropped\n",
			b.Hops, b.CrossingsPerS, b.MessagesPerS, b.MBPerS, b.Runs, b.MinCrossingsPerS, b.Dropped)
	}
	if s := r.Saturation; s != nil {
		fmt.Fprintf(w, "saturation (highest offered rate lossless with p99 <= %.0f ms): %.0f crossings/s offered, %.0f events/s, p99 %.2f ms\n",
			r.P99BoundMs, s.OfferedHz, s.EventsPerS, s.Latency.P99)
		if r.Ratio > 0 {
			fmt.Fprintf(w, "pipeline / raw transport: %.2f (1 hop)", r.Ratio)
			if r.RelayRatio > 0 {
				fmt.Fprintf(w, ", %.2f (2 hops)", r.RelayRatio)
			}
			fmt.Fprintln(w)
		}
		if len(r.FailedBelow) > 0 {
			rates := make([]string, len(r.FailedBelow))
			for i, hz := range r.FailedBelow {
				rates[i] = fmt.Sprintf("%.0f/s", hz)
			}
			steady := "no step passed with every step below it passing"
			if r.SteadyHz != nil && *r.SteadyHz > 0 {
				steady = fmt.Sprintf("every step up to %.0f/s passed", *r.SteadyHz)
			}
			fmt.Fprintf(w, "warning: %s at or below the saturation failed, so the conditions changed during the test (a busy host?); %s; rerun to confirm\n",
				strings.Join(rates, ", "), steady)
		}
	} else if len(r.Steps) > 0 {
		fmt.Fprintf(w, "saturation: no offered rate passed (lossless with p99 <= %.0f ms)\n", r.P99BoundMs)
	}
	fmt.Fprintf(w, "peak resident memory %.0f MB (dataset %.0f MB included)\n", float64(r.PeakRSSBytes)/(1<<20), float64(d.Bytes)/(1<<20))
}
