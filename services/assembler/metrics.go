package assembler

import (
	"fmt"
	"strconv"

	"github.com/prometheus/client_golang/prometheus"
)

type metrics struct {
	latency     prometheus.Histogram
	sinceSent   prometheus.Histogram
	batches     prometheus.Counter
	dropped     prometheus.Counter
	undecodable prometheus.Counter
	caughtUp    prometheus.Counter
	repeated    prometheus.Counter
}

// Latency buckets from 10 us to 10 s; the native histogram gives the fine
// resolution where a Prometheus server supports it.
var latencyBuckets = prometheus.ExponentialBucketsRange(10e-6, 10, 16)

func newMetrics(reg prometheus.Registerer, a *Assembler) (*metrics, error) {
	inst := prometheus.Labels{"builder": strconv.Itoa(a.cfg.Instance)}
	m := &metrics{
		latency: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "bunchsieve_builder_build_latency_seconds", ConstLabels: inst,
			Help:    "Time from a crossing's first fragment arriving to its event being emitted.",
			Buckets: latencyBuckets, NativeHistogramBucketFactor: 1.1, NativeHistogramMaxBucketNumber: 160,
		}),
		sinceSent: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "bunchsieve_builder_readout_to_emit_seconds", ConstLabels: inst,
			Help:    "Time from the readout publishing a crossing's first fragment batch to the builder emitting its event. Emulated crossing timestamps are machine time, not wall time, so this is the wall-clock latency of the crossing.",
			Buckets: latencyBuckets, NativeHistogramBucketFactor: 1.1, NativeHistogramMaxBucketNumber: 160,
		}),
		batches: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_builder_event_batches_sent_total", ConstLabels: inst,
			Help: "Batches of built events published to the selection."}),
		dropped: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_builder_batches_dropped_total", ConstLabels: inst,
			Help: "Fragment batches the NATS client dropped because the builder fell behind (slow consumer)."}),
		undecodable: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_builder_batches_undecodable_total", ConstLabels: inst,
			Help: "Fragment batches that could not be decoded."}),
		caughtUp: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_builder_caught_up_batches_total", ConstLabels: inst,
			Help: "Fragment batches a restarted builder took from the capture stream: published while no builder ran."}),
		repeated: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_builder_repeated_batches_total", ConstLabels: inst,
			Help: "Fragment batches a restarted builder passed over because it, or the builder before it, had taken them already (read from the capture stream and again live)."}),
	}
	for _, c := range []prometheus.Collector{m.latency, m.sinceSent, m.batches, m.dropped, m.undecodable, m.caughtUp, m.repeated, &accounting{a: a, inst: inst}} {
		if err := reg.Register(c); err != nil {
			return nil, fmt.Errorf("assembler: register metrics: %w", err)
		}
	}
	return m, nil
}

// accounting exports the builder library's own counters at scrape time, so
// the metrics can never drift from the summary.
type accounting struct {
	a    *Assembler
	inst prometheus.Labels
}

var (
	descReceived = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_fragments_received_total", "Fragments offered to the event builder, per source.", []string{"source"}, l)
	}
	descDiscarded = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_fragments_discarded_total", "Fragments not used in an event, per source and reason (duplicate, late, malformed, out_of_time). Unknown sources are counted with source=\"unknown\".", []string{"source", "reason"}, l)
	}
	descBytes = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_received_bytes_total", "Encoded size of the fragment batches offered to the event builder, per source (batch framing included).", []string{"source"}, l)
	}
	descAlive = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_source_alive", "1 while a source is sending, 0 once it has been silent past the dead-source timeout.", []string{"source"}, l)
	}
	descOpen = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_open_crossings", "Crossings the builder is tracking (open or recently emitted).", nil, l)
	}
	descHeld = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_fragments_held", "Fragments the window had no room for (when_full: block), waiting in the builder to be offered again.", nil, l)
	}
	descRefusals = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_window_full_refusals_total", "Times a fragment found the window full and was held back (when_full: block); a fragment offered again and refused again counts again.", nil, l)
	}
	descBuilt = func(l prometheus.Labels) *prometheus.Desc {
		return prometheus.NewDesc("bunchsieve_builder_events_built_total", "Events emitted by the builder, by completeness.", []string{"completeness"}, l)
	}
)

func (c *accounting) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []func(prometheus.Labels) *prometheus.Desc{descReceived, descBytes, descDiscarded, descAlive, descOpen, descHeld, descRefusals, descBuilt} {
		ch <- d(c.inst)
	}
}

func (c *accounting) Collect(ch chan<- prometheus.Metric) {
	a := c.a
	a.mu.Lock()
	defer a.mu.Unlock()
	s := a.b.Stats()
	recv, disc, alive, bytes := descReceived(c.inst), descDiscarded(c.inst), descAlive(c.inst), descBytes(c.inst)
	var knownMalformed uint64
	for _, id := range a.cfg.Builder.Sources {
		ss, ok := a.b.SourceStats(id)
		if !ok {
			continue
		}
		knownMalformed += ss.Malformed
		src := strconv.FormatUint(uint64(id), 10)
		ch <- prometheus.MustNewConstMetric(recv, prometheus.CounterValue, float64(ss.Received), src)
		ch <- prometheus.MustNewConstMetric(bytes, prometheus.CounterValue, float64(a.bytesIn[a.sourceIndex[id]]), src)
		for _, r := range []struct {
			name string
			n    uint64
		}{{"duplicate", ss.Duplicate}, {"late", ss.Late}, {"malformed", ss.Malformed}, {"out_of_time", ss.OutOfTime}} {
			ch <- prometheus.MustNewConstMetric(disc, prometheus.CounterValue, float64(r.n), src, r.name)
		}
		up := 0.0
		if a.b.Alive(id) {
			up = 1
		}
		ch <- prometheus.MustNewConstMetric(alive, prometheus.GaugeValue, up, src)
	}
	ch <- prometheus.MustNewConstMetric(disc, prometheus.CounterValue, float64(s.UnknownSource), "unknown", "unknown_source")
	// A damaged fragment whose source id is not expected (the id itself
	// may be what was damaged) is malformed, but of no known source.
	ch <- prometheus.MustNewConstMetric(disc, prometheus.CounterValue, float64(s.Malformed-knownMalformed), "unknown", "malformed")
	ch <- prometheus.MustNewConstMetric(descOpen(c.inst), prometheus.GaugeValue, float64(s.Open))
	ch <- prometheus.MustNewConstMetric(descHeld(c.inst), prometheus.GaugeValue, float64(len(a.held)))
	ch <- prometheus.MustNewConstMetric(descRefusals(c.inst), prometheus.CounterValue, float64(s.WindowFullRefusals))
	built := descBuilt(c.inst)
	ch <- prometheus.MustNewConstMetric(built, prometheus.CounterValue, float64(s.EventsComplete), "complete")
	ch <- prometheus.MustNewConstMetric(built, prometheus.CounterValue, float64(s.EventsIncomplete), "incomplete")
}
