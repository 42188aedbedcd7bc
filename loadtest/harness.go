package loadtest

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"runtime"
	"runtime/debug"
	"sort"
	"strings"
	"time"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Config sets up a load test. Dataset and Network are required; every
// other field's zero value is explained beside it.
type Config struct {
	Dataset *Dataset
	// Origin describes where the dataset came from, for the report.
	Origin string
	// PreparedIn is how long making the dataset took, for the report.
	PreparedIn time.Duration
	Network    *Network
	// Menu is the menu to select with; nil means the built-in starter
	// menu.
	Menu *trigger.Menu
	// Workers is the number of selection workers; zero means GOMAXPROCS.
	Workers int
	// Linger is the builders' assembler.Config.Linger: how long a partly
	// filled batch of built events may wait for more; zero means none.
	Linger time.Duration
	// Rates are the offered crossing rates, one step each, 0 meaning as
	// fast as possible; empty means a single step as fast as possible.
	Rates []float64
	// Duration is how long a step at a fixed rate offers crossings (the
	// dataset is replayed in laps when it is shorter); zero means one pass
	// over the dataset.
	Duration time.Duration
	// Crossings is the length of a step as fast as possible, and the
	// least length of a baseline run (which otherwise lasts about two
	// seconds); zero means the dataset's length.
	Crossings uint64
	// Refine is the number of bisection steps run between the highest
	// passing and the lowest failing rate of the sweep; zero means none.
	Refine int
	// Half adds a step at half the saturation rate once it is known.
	Half bool
	// P99Bound is the p99 latency a passing step must meet; zero means
	// 20 ms.
	P99Bound time.Duration
	// Drain bounds the wait for in-flight events after a step's offering
	// ended; zero means 30 s.
	Drain time.Duration
	// BaselineRuns is how many times each raw-transport baseline is
	// measured; zero means 3, negative means no baseline.
	BaselineRuns int
	// Capture stores every step's fragment batches durably in a JetStream
	// stream of the Network's servers (services/capture) while the step
	// runs, as a deployment recording its runs would, and counts a batch
	// the stream did not store as lost. The servers need JetStream on
	// (EmbeddedStore, or a deployment with it). CaptureBytes caps each
	// step's stream; zero means 2 GiB.
	Capture      bool
	CaptureBytes int64
	// NoRelay leaves out the two-hop baseline.
	NoRelay bool
	// BaselineLength is about how long each baseline run lasts; zero
	// means 2 s (shorter runs mostly measure how fast the process warms
	// up).
	BaselineLength time.Duration
	// KeepMemory keeps every memory sample of each step in the report
	// (soak runs); MemoryEvery is the sampling interval, zero meaning
	// 250 ms.
	KeepMemory  bool
	MemoryEvery time.Duration
	// Progress receives progress lines (with carriage returns, for a
	// terminal); nil means none.
	Progress io.Writer
	// SubjectPrefix prefixes every subject; each step and baseline gets
	// a sub-prefix of its own. Empty means "loadtest".
	SubjectPrefix string
	// Logger receives the services' reports of bad data; nil discards them.
	Logger *slog.Logger
	// ProbeCores measures the cores available to the process before and
	// after the test with a one-second spin each (Machine in the report).
	ProbeCores bool
	// Decisions, when not nil, receives every decision batch the
	// measured steps publish, from a subscriber of its own; it costs the
	// run the delivery, so measuring runs leave it nil.
	Decisions func(data []byte)
	// Instrument, when set, is called after the warm-up, just before the
	// first measured step, and the function it returns after the last
	// step, before the baselines and the closing spin test: what it
	// starts (a CPU profile, an execution trace) sees the measured steps
	// alone. An error from it ends the run before any step.
	Instrument func() (done func(), err error)
}

func (c *Config) fill() error {
	if c.Dataset == nil || c.Network == nil {
		return errors.New("loadtest: Config needs a Dataset and a Network")
	}
	if c.Menu == nil {
		m, err := runconfig.Default().LoadMenu()
		if err != nil {
			return err
		}
		c.Menu = m
	}
	if c.Workers == 0 {
		c.Workers = runtime.GOMAXPROCS(0)
	}
	if len(c.Rates) == 0 {
		c.Rates = []float64{0}
	}
	if c.P99Bound == 0 {
		c.P99Bound = 20 * time.Millisecond
	}
	if c.Drain == 0 {
		c.Drain = 30 * time.Second
	}
	if c.BaselineRuns == 0 {
		c.BaselineRuns = 3
	}
	if c.BaselineLength == 0 {
		c.BaselineLength = 2 * time.Second
	}
	if c.MemoryEvery == 0 {
		c.MemoryEvery = 250 * time.Millisecond
	}
	if c.SubjectPrefix == "" {
		c.SubjectPrefix = "loadtest"
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if err := (transport.Subjects{Prefix: c.SubjectPrefix}).Validate(); err != nil {
		return err
	}
	switch {
	case c.Workers < 1:
		return fmt.Errorf("loadtest: %d selection workers, want >= 1", c.Workers)
	case c.Duration < 0 || c.Refine < 0 || c.P99Bound < 0 || c.Drain < 0 || c.BaselineLength < 0:
		return errors.New("loadtest: durations and refinement steps must not be negative")
	}
	for _, r := range c.Rates {
		if !(r >= 0) || math.IsInf(r, 0) {
			return fmt.Errorf("loadtest: offered rate %v, want a finite value >= 0", r)
		}
	}
	return nil
}

// Run measures the pipeline at every rate of cfg, then the baselines, and
// returns the report. It returns an error only when the test could not be
// run; a step that loses events is reported, not an error. It stops at
// ctx's end with the steps done so far.
func Run(ctx context.Context, cfg Config) (*Report, error) {
	if err := cfg.fill(); err != nil {
		return nil, err
	}
	ds := cfg.Dataset
	host, _ := os.Hostname()
	rep := &Report{
		Schema: SchemaVersion, StartedAt: time.Now().UTC().Truncate(time.Second),
		Machine:   Machine{CPUs: runtime.NumCPU(), GOMAXPROCS: runtime.GOMAXPROCS(0), OS: runtime.GOOS, Arch: runtime.GOARCH, Go: runtime.Version(), Hostname: host},
		Transport: cfg.Network.Describe(), Builders: ds.Partitions, Workers: cfg.Workers, Capture: cfg.Capture,
		Menu: cfg.Menu.Name, MenuHash: cfg.Menu.Hash, P99BoundMs: cfg.P99Bound.Seconds() * 1e3,
		Dataset: DatasetInfo{
			Origin: cfg.Origin, Crossings: ds.Crossings, Sources: len(ds.Sources), Partitions: ds.Partitions, Batches: len(ds.Batches),
			Fragments: ds.Fragments, Bytes: ds.Bytes, MeanBatchBytes: float64(ds.Bytes) / float64(len(ds.Batches)),
			MeanCrossingBytes: float64(ds.Bytes) / float64(ds.Crossings), PreparationSeconds: cfg.PreparedIn.Seconds(),
		},
	}
	rep.Machine.GOGC = debug.SetGCPercent(100)
	debug.SetGCPercent(rep.Machine.GOGC)
	if cfg.ProbeCores {
		rep.Machine.AvailableCoresBefore = availableCores(time.Second)
	}
	h := &harness{cfg: cfg}
	var runErr error
	// One unmeasured pass first: the first run of a process pays for
	// growing its heap and buffers. With 20,000 crossings the first
	// measured step of a physics-generator dataset still ran at ~20% more
	// CPU per event and missed the latency bound; 60,000 took that away.
	if _, err := h.step(ctx, 0, -1, min(ds.Crossings, 60_000)); err != nil {
		return nil, err
	}
	done := func() {}
	if cfg.Instrument != nil {
		d, err := cfg.Instrument()
		if err != nil {
			return nil, err
		}
		done = d
	}
	for _, r := range cfg.Rates {
		if ctx.Err() != nil {
			break
		}
		st, err := h.step(ctx, r, len(rep.Steps), 0)
		if err != nil {
			runErr = err
			break
		}
		rep.Steps = append(rep.Steps, st)
	}
	if runErr == nil && cfg.Refine > 0 {
		for i := 0; i < cfg.Refine && ctx.Err() == nil; i++ {
			lo, hi, ok := bracket(rep.Steps)
			if !ok {
				break
			}
			mid := math.Round((lo+hi)/2/100) * 100
			if mid <= lo || mid >= hi {
				break
			}
			st, err := h.step(ctx, mid, len(rep.Steps), 0)
			if err != nil {
				runErr = err
				break
			}
			rep.Steps = append(rep.Steps, st)
		}
	}
	sort.SliceStable(rep.Steps, func(i, j int) bool { return rep.Steps[i].OfferedHz < rep.Steps[j].OfferedHz })
	setSaturation(rep)
	if runErr == nil && cfg.Half && rep.Saturation != nil && ctx.Err() == nil {
		st, err := h.step(ctx, math.Round(rep.Saturation.OfferedHz/2), len(rep.Steps), 0)
		if err != nil {
			runErr = err
		} else {
			rep.Steps = append(rep.Steps, st)
			sort.SliceStable(rep.Steps, func(i, j int) bool { return rep.Steps[i].OfferedHz < rep.Steps[j].OfferedHz })
			setSaturation(rep)
		}
	}
	done()
	if runErr == nil && cfg.BaselineRuns > 0 && ctx.Err() == nil {
		hops := []int{1, 2}
		if cfg.NoRelay {
			hops = hops[:1]
		}
		bs, err := h.baselines(ctx, hops)
		if err != nil {
			runErr = err
		} else {
			rep.Baseline = bs[0]
			if len(bs) > 1 {
				rep.Relay = bs[1]
			}
		}
	}
	// No ratio against a baseline whose every run dropped messages.
	if s := rep.Saturation; s != nil {
		if b := rep.Baseline; b != nil && b.CrossingsPerS > 0 && b.Dropped == 0 {
			rep.Ratio = s.EventsPerS / b.CrossingsPerS
		}
		if b := rep.Relay; b != nil && b.CrossingsPerS > 0 && b.Dropped == 0 {
			rep.RelayRatio = s.EventsPerS / b.CrossingsPerS
		}
	}
	rep.PeakRSSBytes = maxRSS()
	if cfg.ProbeCores {
		rep.Machine.AvailableCoresAfter = availableCores(time.Second)
	}
	h.progressDone()
	if runErr == nil && ctx.Err() != nil {
		runErr = fmt.Errorf("loadtest: interrupted; the report covers the steps run so far: %w", ctx.Err())
	}
	return rep, runErr
}

// harness runs the steps of one test.
type harness struct {
	cfg    Config
	prefix int
}

func (h *harness) subjects() transport.Subjects {
	h.prefix++
	return transport.Subjects{Prefix: fmt.Sprintf("%s.r%d", h.cfg.SubjectPrefix, h.prefix)}
}

// step runs the pipeline once at rateHz; index numbers it for progress
// lines (-1: the warm-up), n > 0 sets its length.
func (h *harness) step(ctx context.Context, rateHz float64, index int, n uint64) (Step, error) {
	cfg := h.cfg
	ds := cfg.Dataset
	crossings := cfg.Crossings
	if crossings == 0 {
		crossings = ds.Crossings
	}
	if rateHz > 0 && cfg.Duration > 0 {
		crossings = uint64(math.Ceil(rateHz * cfg.Duration.Seconds()))
	}
	if n > 0 {
		crossings = n
	}
	pc := pipelineConfig{ds: ds, net: cfg.Network, menu: cfg.Menu, workers: cfg.Workers, linger: cfg.Linger, subjects: h.subjects(), logger: cfg.Logger, decisions: cfg.Decisions}
	if index < 0 {
		pc.decisions = nil // the warm-up's decisions are nobody's business
	}
	// Each step starts from a collected heap, as a Go benchmark does: the
	// garbage of the dataset's preparation or of the step before is not
	// this step's to collect.
	runtime.GC()
	var keep *stepCapture
	if cfg.Capture {
		var err error
		if keep, err = openStepCapture(cfg.Network, pc.subjects, cfg.CaptureBytes); err != nil {
			return Step{}, err
		}
	}
	p, err := newPipeline(pc)
	if err != nil {
		if keep != nil {
			_ = keep.close()
		}
		return Step{}, err
	}
	defer p.close()
	var progress func(offered, decided uint64)
	if cfg.Progress != nil {
		label := "max"
		if rateHz > 0 {
			label = fmt.Sprintf("%.0f/s", rateHz)
		}
		name := fmt.Sprintf("step %d", index+1)
		if index < 0 {
			name = "warm-up"
		}
		progress = func(offered, decided uint64) {
			fmt.Fprintf(cfg.Progress, "\r%s at %s: offered %d of %d crossings, decided %d   ", name, label, offered, crossings, decided)
		}
	}
	res := p.run(ctx, crossings, rateHz, cfg.Drain, cfg.KeepMemory, cfg.MemoryEvery, progress)
	st := Step{OfferedHz: rateHz, Laps: res.feed.Laps, CrossingsPlanned: crossings, FeedBehindMs: res.feed.Behind.Seconds() * 1e3}
	st.Account = p.accounting(res.feed)
	if keep != nil {
		want := res.feed.Batches + uint64(len(ds.Ends))
		n, err := keep.stored(want, 2*time.Second)
		if cerr := keep.close(); err == nil {
			err = cerr
		}
		if err != nil {
			return Step{}, err
		}
		st.Account.Capture = &CaptureCount{Published: want, Stored: n}
	}
	switch {
	case res.err != nil:
		st.Error = res.err.Error()
	case ctx.Err() != nil:
		// The feed stops early and still closes its accounting: such a
		// step must not pass for one that ran its course.
		st.Error = fmt.Sprintf("interrupted: offered %d of %d crossings", res.feed.Crossings, crossings)
	case res.feed.Crossings != ds.Offered(crossings):
		st.Error = fmt.Sprintf("the feed stopped early: offered %d of %d crossings", res.feed.Crossings, ds.Offered(crossings))
	}
	if pub := res.feed.Last.Sub(res.feed.First).Seconds(); pub > 0 {
		st.AchievedOfferHz = float64(res.feed.Crossings) / pub
	}
	if !res.end.IsZero() {
		st.DurationS = res.end.Sub(res.feed.First).Seconds()
	}
	if st.DurationS > 0 {
		st.EventsPerS = float64(st.Account.EventsDecided) / st.DurationS
		st.FragmentsPerS = float64(st.Account.FragmentsInEvents) / st.DurationS
		st.MBPerS = float64(res.feed.Bytes) / st.DurationS / 1e6
	}
	st.Latency = latencyOf(&p.e2e)
	st.CPU = cpuUse(res.cpu, res.cpuSys, st.DurationS, st.Account.EventsDecided)
	st.Memory = MemoryUse{PeakHeapBytes: res.memory.HeapBytes, PeakTotalBytes: res.memory.TotalBytes, PeakRSSBytes: res.memory.RSSBytes, MaxRSSBytes: res.memory.MaxRSSBytes}
	if cfg.KeepMemory {
		st.Memory.Samples = res.series
		st.Memory.Flatness = flatness(res.series, time.Minute)
	}
	st.Pass, st.Reason = judge(st, cfg.P99Bound)
	return st, nil
}

// judge says whether a step kept up: nothing lost and p99 within bound;
// a fixed-rate step must also have been offered at (nearly) its rate and
// its feed may not have fallen behind its schedule by more than the bound
// at any moment (latency is measured from the actual publish, so a stall
// of the feed itself would not show in it).
func judge(st Step, bound time.Duration) (bool, string) {
	a := st.Account
	boundMs := bound.Seconds() * 1e3
	switch {
	case st.Error != "":
		return false, st.Error
	case !a.Lossless():
		return false, lossReason(a)
	case st.Latency.P99 > boundMs:
		return false, fmt.Sprintf("p99 %.1f ms > %.0f ms", st.Latency.P99, boundMs)
	case st.OfferedHz > 0 && st.AchievedOfferHz < 0.97*st.OfferedHz:
		return false, fmt.Sprintf("offered only %.0f/s", st.AchievedOfferHz)
	case st.OfferedHz > 0 && st.FeedBehindMs > boundMs:
		return false, fmt.Sprintf("feed %.1f ms behind schedule > %.0f ms", st.FeedBehindMs, boundMs)
	}
	return true, ""
}

// lossReason names every term by which a's accounting did not close.
func lossReason(a Accounting) string {
	var terms []string
	add := func(n uint64, what string) {
		if n != 0 {
			terms = append(terms, fmt.Sprintf("%d %s", n, what))
		}
	}
	add(a.EventsLost, "events lost")
	add(a.CrossingsOffered-min(a.EventsBuilt, a.CrossingsOffered), "crossings not built")
	add(a.EventsIncomplete, "events incomplete")
	add(a.FragmentsOffered-min(a.FragmentsReceived, a.FragmentsOffered), "fragments not received")
	add(a.FragmentsReceived-min(a.FragmentsInEvents, a.FragmentsReceived), "fragments not in events")
	add(a.FragmentBatchesDropped, "fragment batches dropped")
	add(a.EventBatchesDropped, "event batches dropped")
	add(a.FragmentBatchesUndecodable, "fragment batches undecodable")
	add(a.EventBatchesUndecodable, "event batches undecodable")
	if c := a.Capture; c != nil {
		add(c.Published-min(c.Stored, c.Published), "fragment batches not stored by the capture")
		add(c.Stored-min(c.Stored, c.Published), "batches more in the capture than published")
	}
	if len(terms) == 0 {
		return "accounting does not close"
	}
	return strings.Join(terms, ", ")
}

// setSaturation sets rep's saturation step and, when steps below it
// failed, FailedBelow and SteadyHz; rep.Steps are in order of rate.
func setSaturation(rep *Report) {
	rep.Saturation = saturation(rep.Steps)
	rep.FailedBelow, rep.SteadyHz = nil, nil
	if rep.Saturation == nil {
		return
	}
	// A failed step at the saturation's own rate (a refine or half-rate
	// step landing on a rate run already) counts too: that rate both
	// passed and failed.
	lowestFailed := math.Inf(1)
	for _, st := range rep.Steps {
		if st.OfferedHz <= 0 || st.OfferedHz > rep.Saturation.OfferedHz || st.Pass {
			continue
		}
		rep.FailedBelow = append(rep.FailedBelow, st.OfferedHz)
		lowestFailed = min(lowestFailed, st.OfferedHz)
	}
	if rep.FailedBelow == nil {
		return
	}
	steady := 0.0
	for _, st := range rep.Steps {
		if st.Pass && st.OfferedHz > 0 && st.OfferedHz < lowestFailed {
			steady = max(steady, st.OfferedHz)
		}
	}
	rep.SteadyHz = &steady
}

// saturation returns the passing fixed-rate step of highest rate.
func saturation(steps []Step) *Step {
	var best *Step
	for i := range steps {
		s := &steps[i]
		if s.Pass && s.OfferedHz > 0 && (best == nil || s.OfferedHz > best.OfferedHz) {
			best = s
		}
	}
	if best == nil {
		return nil
	}
	c := *best
	c.Memory.Samples = nil
	return &c
}

// bracket returns the highest passing rate and the lowest failing rate
// above it.
func bracket(steps []Step) (lo, hi float64, ok bool) {
	hi = math.Inf(1)
	for _, s := range steps {
		if s.OfferedHz > 0 && s.Pass {
			lo = max(lo, s.OfferedHz)
		}
	}
	for _, s := range steps {
		if s.OfferedHz > lo && !s.Pass {
			hi = min(hi, s.OfferedHz)
		}
	}
	return lo, hi, lo > 0 && !math.IsInf(hi, 1)
}

// betterBaseline reports whether run b should stand for its baseline
// rather than cur: a run that dropped messages measured what was
// published, not what arrived, so it counts only if every run did;
// otherwise the faster run.
func betterBaseline(b, cur *Baseline) bool {
	switch {
	case cur == nil:
		return true
	case (b.Dropped == 0) != (cur.Dropped == 0):
		return b.Dropped == 0
	}
	return b.CrossingsPerS > cur.CrossingsPerS
}

// baselines measures each raw-transport baseline cfg.BaselineRuns times,
// the kinds taking turns, after one unmeasured pass to warm up. Each run
// replays the dataset verbatim in as many laps as make it last about
// cfg.BaselineLength at the rate last measured for its kind.
func (h *harness) baselines(ctx context.Context, hops []int) ([]*Baseline, error) {
	ds := h.cfg.Dataset
	warm, err := measureBaseline(ctx, h.cfg.Network, ds, h.subjects(), ds.Crossings, hops[0], h.cfg.Workers, 64)
	if err != nil {
		return nil, err
	}
	// Each run is sized from the last rate measured of its kind (the
	// cold warm-up's at first), so that it lasts about BaselineLength: a
	// size fixed from the warm-up alone gave runs of 0.3 to 1.5 s.
	length := func(rate float64) uint64 {
		crossings := ds.Crossings
		if rate > 0 {
			laps := math.Ceil(h.cfg.BaselineLength.Seconds() * rate / float64(ds.Crossings))
			crossings = uint64(max(laps, 1)) * ds.Crossings
		}
		return max(crossings, h.cfg.Crossings)
	}
	last := make([]float64, len(hops))
	for k := range last {
		last[k] = warm.CrossingsPerS
	}
	best := make([]*Baseline, len(hops))
	slowest := make([]float64, len(hops))
	for i := 0; i < h.cfg.BaselineRuns; i++ {
		for k, hop := range hops {
			if h.cfg.Progress != nil {
				fmt.Fprintf(h.cfg.Progress, "\rraw transport, %d hop(s): run %d of %d                              ", hop, i+1, h.cfg.BaselineRuns)
			}
			b, err := measureBaseline(ctx, h.cfg.Network, ds, h.subjects(), length(last[k]), hop, h.cfg.Workers, 64)
			if err != nil {
				return nil, err
			}
			last[k] = b.CrossingsPerS
			if betterBaseline(b, best[k]) {
				best[k] = b
			}
			if i == 0 || b.CrossingsPerS < slowest[k] {
				slowest[k] = b.CrossingsPerS
			}
		}
	}
	for k := range best {
		best[k].Runs, best[k].MinCrossingsPerS = h.cfg.BaselineRuns, slowest[k]
	}
	return best, nil
}

func (h *harness) progressDone() {
	if h.cfg.Progress != nil {
		fmt.Fprintf(h.cfg.Progress, "\r%80s\r", "")
	}
}

// Flatness compares memory late in a run with memory after its first
// minute.
type Flatness struct {
	// AfterS is the end of the reference period, the first minute.
	AfterS float64 `json:"after_s"`
	// FirstTotalBytes and FirstRSSBytes are the largest samples of the
	// runtime's mapped memory and of the resident set in the reference
	// period; PeakTotalBytes and PeakRSSBytes the largest over the whole
	// run.
	FirstTotalBytes uint64 `json:"first_total_bytes"`
	PeakTotalBytes  uint64 `json:"peak_total_bytes"`
	FirstRSSBytes   uint64 `json:"first_rss_bytes"`
	PeakRSSBytes    uint64 `json:"peak_rss_bytes"`
	// TotalGrowth and RSSGrowth are peak over reference: 1.10 is 10%
	// growth after the first minute.
	TotalGrowth float64 `json:"total_growth"`
	RSSGrowth   float64 `json:"rss_growth"`
}

// flatness computes the Flatness of a memory series; nil when the series
// does not reach past the reference.
func flatness(series []MemorySample, after time.Duration) *Flatness {
	if len(series) == 0 || series[len(series)-1].AtS <= after.Seconds() {
		return nil
	}
	f := &Flatness{AfterS: after.Seconds()}
	for _, m := range series {
		if m.AtS <= after.Seconds() {
			f.FirstTotalBytes = max(f.FirstTotalBytes, m.TotalBytes)
			f.FirstRSSBytes = max(f.FirstRSSBytes, m.RSSBytes)
		}
		f.PeakTotalBytes = max(f.PeakTotalBytes, m.TotalBytes)
		f.PeakRSSBytes = max(f.PeakRSSBytes, m.RSSBytes)
	}
	if f.FirstTotalBytes > 0 {
		f.TotalGrowth = float64(f.PeakTotalBytes) / float64(f.FirstTotalBytes)
	}
	if f.FirstRSSBytes > 0 {
		f.RSSGrowth = float64(f.PeakRSSBytes) / float64(f.FirstRSSBytes)
	}
	return f
}
