package selector

import (
	"fmt"

	"github.com/prometheus/client_golang/prometheus"
)

type metrics struct {
	latency     prometheus.Histogram
	endToEnd    prometheus.Histogram
	decisions   prometheus.Counter
	accepted    prometheus.Counter
	dropped     prometheus.Counter
	undecodable prometheus.Counter
	lost        prometheus.Counter
}

func newMetrics(reg prometheus.Registerer, s *Selector) (*metrics, error) {
	m := &metrics{
		latency: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "bunchsieve_selection_latency_seconds", Help: "Time to compute the features and apply the menu to one event.",
			Buckets: prometheus.ExponentialBucketsRange(1e-6, 1, 16), NativeHistogramBucketFactor: 1.1, NativeHistogramMaxBucketNumber: 160,
		}),
		endToEnd: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "bunchsieve_end_to_end_latency_seconds", Help: "Time from the readout publishing a crossing's first fragment batch to its decision.",
			Buckets: prometheus.ExponentialBucketsRange(10e-6, 10, 16), NativeHistogramBucketFactor: 1.1, NativeHistogramMaxBucketNumber: 160,
		}),
		decisions:   prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_selection_decisions_total", Help: "Events the selection decided on."}),
		accepted:    prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_selection_events_accepted_total", Help: "Events accepted by at least one rule after prescale."}),
		dropped:     prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_selection_batches_dropped_total", Help: "Event batches the NATS client dropped because the selection fell behind (slow consumer)."}),
		undecodable: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_selection_batches_undecodable_total", Help: "Event batches that could not be decoded."}),
		lost:        prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_selection_events_lost_total", Help: "Events the builders announced that never reached the selection, given up at the end of the run (counted by worker 0)."}),
	}
	for _, c := range []prometheus.Collector{m.latency, m.endToEnd, m.decisions, m.accepted, m.dropped, m.undecodable, m.lost, &ruleCounts{s: s}} {
		if err := reg.Register(c); err != nil {
			return nil, fmt.Errorf("selector: register metrics: %w", err)
		}
	}
	return m, nil
}

var (
	descPassed         = prometheus.NewDesc("bunchsieve_selection_rule_passed_total", "Events satisfying a rule's condition, before prescale.", []string{"rule"}, nil)
	descAccepted       = prometheus.NewDesc("bunchsieve_selection_rule_accepted_total", "Events a rule kept after its prescale.", []string{"rule"}, nil)
	descStreamPassed   = prometheus.NewDesc("bunchsieve_selection_stream_passed_total", "Events for which at least one rule of the stream passed before prescale.", []string{"stream"}, nil)
	descStreamAccepted = prometheus.NewDesc("bunchsieve_selection_stream_accepted_total", "Events routed to the stream: at least one of its rules kept them after prescale.", []string{"stream"}, nil)
	descMenuInfo       = prometheus.NewDesc("bunchsieve_selection_menu_info", "Constant 1, labelled with the menu in force, its hash and the active prescale set.", []string{"menu", "menu_hash", "prescale_set"}, nil)
	descLumiSlice      = prometheus.NewDesc("bunchsieve_selection_lumi_slice", "Highest lumi slice the selection has decided events of (0 before the first event).", nil, nil)
	descPrescale       = prometheus.NewDesc("bunchsieve_selection_rule_prescale", "Prescale in force for a rule (0 when the rule is off).", []string{"rule"}, nil)
)

// ruleCounts exports the selection library's counters at scrape time.
type ruleCounts struct{ s *Selector }

func (c *ruleCounts) Describe(ch chan<- *prometheus.Desc) {
	ch <- descPassed
	ch <- descAccepted
	ch <- descPrescale
	ch <- descStreamPassed
	ch <- descStreamAccepted
	ch <- descMenuInfo
	ch <- descLumiSlice
}

func (c *ruleCounts) Collect(ch chan<- prometheus.Metric) {
	for _, rc := range c.s.Counts() {
		ch <- prometheus.MustNewConstMetric(descPassed, prometheus.CounterValue, float64(rc.Passed), rc.Name)
		ch <- prometheus.MustNewConstMetric(descAccepted, prometheus.CounterValue, float64(rc.Kept), rc.Name)
		ch <- prometheus.MustNewConstMetric(descPrescale, prometheus.GaugeValue, float64(rc.Prescale), rc.Name)
	}
	for _, sc := range c.s.StreamCounts() {
		ch <- prometheus.MustNewConstMetric(descStreamPassed, prometheus.CounterValue, float64(sc.Passed), sc.Name)
		ch <- prometheus.MustNewConstMetric(descStreamAccepted, prometheus.CounterValue, float64(sc.Accepted), sc.Name)
	}
	t := c.s.Trigger()
	ch <- prometheus.MustNewConstMetric(descMenuInfo, prometheus.GaugeValue, 1, t.Menu().Name, t.Menu().Hash, t.PrescaleStatus().Set)
	ch <- prometheus.MustNewConstMetric(descLumiSlice, prometheus.GaugeValue, float64(c.s.LumiSlice()))
}
