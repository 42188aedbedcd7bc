package stack

import (
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// phaseNames are the values of the phase label, all always exported.
var phaseNames = []string{"idle", "ready", "flowing", "draining", "faulted"}

var (
	descRunNumber = prometheus.NewDesc("bunchsieve_run_number", "Number of the run configured or in progress.", nil, nil)
	descRunPhase  = prometheus.NewDesc("bunchsieve_run_phase", "1 for the run's current phase, 0 for the others.", []string{"phase"}, nil)
	descRunStart  = prometheus.NewDesc("bunchsieve_run_start_time_seconds", "Unix time at which the current run started flowing; 0 before it started.", nil, nil)
)

// runState is what the run metrics report.
type runState struct {
	phase string
	run   uint32
	start time.Time
}

// runMetrics exports the state of whatever steers the host's runs: a
// single-run stack or a controller.
type runMetrics struct {
	mu    sync.Mutex
	state func() runState
}

func (r *runMetrics) set(f func() runState) {
	r.mu.Lock()
	r.state = f
	r.mu.Unlock()
}

func (r *runMetrics) Describe(ch chan<- *prometheus.Desc) {
	ch <- descRunNumber
	ch <- descRunPhase
	ch <- descRunStart
}

func (r *runMetrics) Collect(ch chan<- prometheus.Metric) {
	r.mu.Lock()
	f := r.state
	r.mu.Unlock()
	st := runState{phase: "idle"}
	if f != nil {
		st = f()
	}
	ch <- prometheus.MustNewConstMetric(descRunNumber, prometheus.GaugeValue, float64(st.run))
	for _, p := range phaseNames {
		v := 0.0
		if p == st.phase {
			v = 1
		}
		ch <- prometheus.MustNewConstMetric(descRunPhase, prometheus.GaugeValue, v, p)
	}
	start := 0.0
	if !st.start.IsZero() {
		start = float64(st.start.UnixNano()) / 1e9
	}
	ch <- prometheus.MustNewConstMetric(descRunStart, prometheus.GaugeValue, start)
}
