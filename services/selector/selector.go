// Package selector is the selection service: it takes built events from
// NATS, decodes them into calorimeter towers, runs the menu, publishes the
// decisions and exports per-rule counts and latencies as metrics.
package selector

import (
	"context"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/telemetry"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Config sets up a selection worker.
type Config struct {
	Menu     *trigger.Menu
	Geometry *detector.Geometry
	// Worker numbers this worker in its decision batches.
	Worker int
	// Builders is how many builder instances feed the selection; the worker
	// ends after the end-of-run batch of each. Zero means 1.
	Builders int
	// BatchDecisions is how many decisions one published batch carries at
	// most; zero means 256.
	BatchDecisions int
	Subjects       transport.Subjects
	// Logger receives problems with incoming data; nil means slog.Default().
	Logger *slog.Logger
}

// Selector is one selection worker. Run may be called once; the counters
// are safe to read concurrently.
type Selector struct {
	cfg Config
	nc  *nats.Conn
	sel atomic.Pointer[trigger.Selector] // swapped at a lumi-slice boundary by LoadMenu
	m   *metrics
	log *slog.Logger

	mu       sync.Mutex // guards the fields below
	ev       trigger.Event
	dec      trigger.Decision
	out      *pb.DecisionBatch
	seq      uint64
	ends     int
	expected uint64
	seen     uint64
	accepted uint64
	events   uint64
	pubErr   error
	finished chan struct{}
	ready    chan struct{}

	streams      *streamCounts // of the menu in force
	decidedAny   bool
	maxSlice     uint32
	pending      *trigger.Selector
	pendingAfter uint32

	undecoded atomic.Uint64
	dropped   atomic.Uint64

	// EndToEnd holds the time from the readout publishing a crossing's
	// first fragment batch to its decision.
	EndToEnd telemetry.Latency
}

// New returns a selection worker on nc with metrics on reg.
func New(cfg Config, nc *nats.Conn, reg prometheus.Registerer) (*Selector, error) {
	if cfg.Menu == nil || cfg.Geometry == nil {
		return nil, fmt.Errorf("selector: a menu and a geometry are required")
	}
	if cfg.Builders == 0 {
		cfg.Builders = 1
	}
	if cfg.BatchDecisions == 0 {
		cfg.BatchDecisions = 256
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if err := cfg.Subjects.Validate(); err != nil {
		return nil, err
	}
	g := cfg.Geometry
	sel, err := trigger.NewSelector(cfg.Menu, trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep})
	if err != nil {
		return nil, fmt.Errorf("selector: %w", err)
	}
	s := &Selector{cfg: cfg, nc: nc, log: cfg.Logger, finished: make(chan struct{}), ready: make(chan struct{}),
		out: &pb.DecisionBatch{Worker: uint32(cfg.Worker)}}
	s.sel.Store(sel)
	s.streams = newStreamCounts(cfg.Menu)
	m, err := newMetrics(reg, s)
	if err != nil {
		return nil, err
	}
	s.m = m
	return s, nil
}

// Trigger returns the selection library instance, for prescale-set changes.
func (s *Selector) Trigger() *trigger.Selector { return s.sel.Load() }

// LoadMenu validates m against the geometry and makes it the menu from the
// first event of the next lumi slice on: the first event whose slice is
// greater than the highest slice decided so far. Before any event it takes
// effect at once. A second call before the switch replaces the first. The
// new menu's counts start from zero. It is safe for concurrent use.
func (s *Selector) LoadMenu(m *trigger.Menu, prescaleSet string) error {
	g := s.cfg.Geometry
	next, err := trigger.NewSelector(m, trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep})
	if err != nil {
		return fmt.Errorf("selector: %w", err)
	}
	if prescaleSet != "" {
		if err := next.SetPrescaleSet(prescaleSet); err != nil {
			return fmt.Errorf("selector: %w", err)
		}
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if !s.decidedAny {
		s.sel.Store(next)
		s.streams = newStreamCounts(m)
		return nil
	}
	s.pending, s.pendingAfter = next, s.maxSlice
	return nil
}

// PendingMenu returns the hash of a menu waiting for the next lumi slice
// and the slice after which it takes effect, or "" if none waits.
func (s *Selector) PendingMenu() (hash string, after uint32) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.pending == nil {
		return "", 0
	}
	return s.pending.Menu().Hash, s.pendingAfter
}

// LumiSlice returns the highest lumi slice decided so far.
func (s *Selector) LumiSlice() uint32 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.maxSlice
}

// Run subscribes to built events and decides on them until every builder
// has sent its end-of-run batch and all its events are decided, or ctx
// ends. It returns the first publishing error, if any.
func (s *Selector) Run(ctx context.Context) error {
	sub, err := transport.Subscribe(s.nc, s.cfg.Subjects.Built(), s.cfg.Subjects.SelectQueue(), s.onMsg)
	if err != nil {
		return fmt.Errorf("selector: %w", err)
	}
	if err := s.nc.Flush(); err != nil {
		return fmt.Errorf("selector: subscribe: %w", err)
	}
	close(s.ready)
	tick := time.NewTicker(5 * time.Millisecond)
	defer tick.Stop()
loop:
	for {
		select {
		case <-ctx.Done():
			break loop
		case <-s.finished:
			break loop
		case <-tick.C:
			s.noteDrops(sub)
			s.mu.Lock()
			err := s.publishLocked()
			s.mu.Unlock()
			if err != nil {
				return err
			}
		}
	}
	_ = sub.Unsubscribe()
	s.noteDrops(sub)
	s.mu.Lock()
	defer s.mu.Unlock()
	if err := s.publishLocked(); err != nil {
		return err
	}
	if err := s.nc.Flush(); err != nil {
		return fmt.Errorf("selector: flush: %w", err)
	}
	return s.pubErr
}

// Ready is closed once Run has subscribed and the server has confirmed
// it: events published after that reach this worker's queue group.
func (s *Selector) Ready() <-chan struct{} { return s.ready }

func (s *Selector) onMsg(msg *nats.Msg) {
	var batch pb.EventBatch
	if err := proto.Unmarshal(msg.Data, &batch); err != nil {
		s.undecoded.Add(1)
		s.m.undecodable.Inc()
		s.log.Warn("undecodable event batch", "subject", msg.Subject, "error", err)
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, be := range batch.Events {
		s.decide(be)
	}
	if batch.EndOfRun {
		s.ends++
		s.expected += batch.EventsTotal
	}
	if err := s.publishLocked(); err != nil && s.pubErr == nil {
		s.pubErr = err
	}
	if s.ends >= s.cfg.Builders && s.seen >= s.expected {
		select {
		case <-s.finished:
		default:
			close(s.finished)
		}
	}
}

// decide runs the menu on one built event. Called with s.mu held.
func (s *Selector) decide(be *pb.BuiltEvent) {
	start := time.Now()
	if s.pending != nil && be.LumiSlice > s.pendingAfter {
		s.sel.Store(s.pending)
		s.streams = newStreamCounts(s.pending.Menu())
		s.pending = nil
	}
	s.decidedAny = true
	s.maxSlice = max(s.maxSlice, be.LumiSlice)
	sel := s.sel.Load()
	s.fill(be)
	sel.Decide(&s.ev, &s.dec)
	took := time.Since(start)
	s.m.latency.Observe(took.Seconds())
	s.seen++
	s.events++
	d := &pb.Decision{
		Run: be.Run, Orbit: be.Orbit, Bcid: be.Bcid, LumiSlice: be.LumiSlice,
		Accept: s.dec.Accept, MenuHash: s.dec.MenuHash, PrescaleSet: s.dec.PrescaleSet,
		EventFlags: be.Flags, Streams: append([]string(nil), s.dec.Streams...),
	}
	for i, n := range sel.RuleNames() {
		if s.dec.Passed[i] {
			d.Rules = append(d.Rules, &pb.RuleResult{Rule: n, Index: uint32(i), PassedBeforePrescale: true, PassedAfterPrescale: s.dec.Kept[i]})
		}
	}
	s.streams.add(s.dec.Passed, s.dec.Kept)
	if s.dec.Accept {
		s.accepted++
		s.m.accepted.Inc()
	}
	s.m.decisions.Inc()
	if be.ReadoutUnixNs > 0 {
		e2e := time.Duration(time.Now().UnixNano() - be.ReadoutUnixNs)
		s.EndToEnd.Record(e2e)
		s.m.endToEnd.Observe(e2e.Seconds())
	}
	s.out.Decisions = append(s.out.Decisions, d)
	if len(s.out.Decisions) >= s.cfg.BatchDecisions {
		if err := s.publishLocked(); err != nil && s.pubErr == nil {
			s.pubErr = err
		}
	}
}

// fill decodes the calorimeter fragments of be into s.ev.
func (s *Selector) fill(be *pb.BuiltEvent) {
	FillEvent(s.cfg.Geometry, be.Fragments, be.LumiSlice, &s.ev)
}

// FillEvent decodes the calorimeter payloads of fragments into ev's towers
// (ET from least counts, eta and phi at the tower centres of g), reusing
// ev's storage. Towers outside the grid or with zero counts are skipped.
func FillEvent(g *detector.Geometry, fragments []*pb.Fragment, lumiSlice uint32, ev *trigger.Event) {
	ev.Towers = ev.Towers[:0]
	ev.LumiSlice = lumiSlice
	for _, f := range fragments {
		calo := f.GetCalo()
		if calo == nil {
			continue
		}
		counts := calo.EtCounts
		for i, t := range calo.Towers {
			if i >= len(counts) {
				break
			}
			layer, ieta, iphi, ok := g.TowerCoords(int(t))
			if !ok || counts[i] == 0 {
				continue
			}
			ev.Towers = append(ev.Towers, trigger.Tower{
				Layer: uint8(layer), IEta: ieta, IPhi: iphi,
				Eta: g.EtaCentre(ieta), Phi: g.PhiCentre(iphi), ET: g.ET(counts[i]),
			})
		}
	}
}

func (s *Selector) publishLocked() error {
	if len(s.out.Decisions) == 0 {
		return nil
	}
	s.out.Sequence = s.seq
	data, err := proto.Marshal(s.out)
	if err != nil {
		return fmt.Errorf("selector: encode decisions: %w", err)
	}
	if err := s.nc.Publish(s.cfg.Subjects.Decisions(), data); err != nil {
		return fmt.Errorf("selector: publish decisions: %w", err)
	}
	s.seq++
	s.out.Decisions = s.out.Decisions[:0]
	return nil
}

func (s *Selector) noteDrops(sub *nats.Subscription) {
	if n, err := sub.Dropped(); err == nil && uint64(n) > s.dropped.Load() {
		s.m.dropped.Add(float64(uint64(n) - s.dropped.Load()))
		s.dropped.Store(uint64(n))
	}
}

// Counts returns the per-rule counts of the selection library.
func (s *Selector) Counts() []trigger.RuleCount { return s.sel.Load().Counts() }

// Events returns how many events this worker decided on.
func (s *Selector) Events() uint64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.events
}

// Accepted returns how many events this worker accepted.
func (s *Selector) Accepted() uint64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.accepted
}

// DroppedMessages returns how many event batches NATS dropped because this
// worker fell behind.
func (s *Selector) DroppedMessages() uint64 { return s.dropped.Load() }

// UndecodableMessages returns how many event batches could not be decoded.
func (s *Selector) UndecodableMessages() uint64 { return s.undecoded.Load() }

// streamCounts counts, per stream of a menu, the events for which one of
// its rules passed before prescale and those routed to it after.
type streamCounts struct {
	names            []string
	rules            [][]int // stream -> rule indices
	passed, accepted []uint64
}

func newStreamCounts(m *trigger.Menu) *streamCounts {
	sc := &streamCounts{}
	for _, st := range m.Streams {
		var idx []int
		for _, r := range st.Rules {
			if i := m.RuleIndex(r); i >= 0 {
				idx = append(idx, i)
			}
		}
		sc.names = append(sc.names, st.Name)
		sc.rules = append(sc.rules, idx)
	}
	sc.passed = make([]uint64, len(sc.names))
	sc.accepted = make([]uint64, len(sc.names))
	return sc
}

func (sc *streamCounts) add(passed, kept []bool) {
	for k, idx := range sc.rules {
		p, a := false, false
		for _, i := range idx {
			p = p || passed[i]
			a = a || kept[i]
		}
		if p {
			sc.passed[k]++
		}
		if a {
			sc.accepted[k]++
		}
	}
}

// StreamCount is one stream's counts.
type StreamCount struct {
	Name             string
	Passed, Accepted uint64
}

// StreamCounts returns the per-stream counts of the menu in force.
func (s *Selector) StreamCounts() []StreamCount {
	s.mu.Lock()
	defer s.mu.Unlock()
	out := make([]StreamCount, len(s.streams.names))
	for i, n := range s.streams.names {
		out[i] = StreamCount{Name: n, Passed: s.streams.passed[i], Accepted: s.streams.accepted[i]}
	}
	return out
}
