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
	// Workers is how many selection workers share the queue group; zero
	// means 1. The queue group hands each builder's end-of-run batch to one
	// worker only, so with more than one a worker reads the ends from the
	// end subject every worker receives, tells the others its decided count
	// on the progress subject, and ends when the counts of all workers add
	// up to the events the builders emitted. Every worker then needs its
	// own Worker number.
	Workers int
	// EndToEnd, when not nil, receives every end-to-end latency as well as
	// Selector.EndToEnd does, so the workers of one process can fill one
	// histogram. Nil means none.
	EndToEnd *telemetry.Latency
	// BatchDecisions is how many decisions one published batch carries at
	// most; zero means 256.
	BatchDecisions int
	// EndWait is how long, once every builder has announced the end of
	// the run, the worker waits for events still missing from the totals
	// they announced, counted from the last event decided: past it the
	// worker ends and counts them lost (EventsLost). Core NATS loses what
	// is published while a connection is down, so waiting for ever would
	// hang the run. Zero means 5 s.
	EndWait  time.Duration
	Subjects transport.Subjects
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
	we       wireEvent
	fill     wireFill
	slab     fragmentSlab
	table    *towerTable
	names    []string          // rule names of namesOf
	namesOf  *trigger.Selector // the selector names belongs to
	out      *pb.DecisionBatch
	outBuf   []byte
	seq      uint64
	clock    time.Time // the last clock reading while deciding a batch, or zero
	ends     int
	expected uint64
	seen     uint64

	// With more than one worker: each builder's events_total, by builder,
	// and the other workers' decided counts, by worker.
	builderEnds map[uint32]uint64
	others      map[int]uint64
	reported    uint64 // decided count last published on the progress subject
	progBuf     []byte
	accepted    uint64
	events      uint64
	pubErr      error
	finished    chan struct{}
	ready       chan struct{}

	streams      *streamCounts // of the menu in force
	decidedAny   bool
	maxSlice     uint32
	pending      *trigger.Selector
	pendingAfter uint32

	undecoded atomic.Uint64
	dropped   atomic.Uint64

	// The wait for events missing at the end (Config.EndWait): the time
	// every builder had ended or the last event was decided since, the
	// decided count then, and what was given up for lost.
	waitSince time.Time
	waitHave  uint64
	lost      uint64

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
	if cfg.Workers == 0 {
		cfg.Workers = 1
	}
	if cfg.Builders < 0 || cfg.Workers < 0 {
		return nil, fmt.Errorf("selector: %d builders and %d workers, want >= 0 each", cfg.Builders, cfg.Workers)
	}
	if cfg.BatchDecisions == 0 {
		cfg.BatchDecisions = 256
	}
	if cfg.EndWait == 0 {
		cfg.EndWait = 5 * time.Second
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if err := cfg.Subjects.Validate(); err != nil {
		return nil, err
	}
	g := cfg.Geometry
	sel, err := trigger.NewSelector(cfg.Menu, GridOf(g))
	if err != nil {
		return nil, fmt.Errorf("selector: %w", err)
	}
	s := &Selector{cfg: cfg, nc: nc, log: cfg.Logger, finished: make(chan struct{}), ready: make(chan struct{}),
		out: &pb.DecisionBatch{Worker: uint32(cfg.Worker)}, table: newTowerTable(g),
		builderEnds: map[uint32]uint64{}, others: map[int]uint64{}}
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
	next, err := trigger.NewSelector(m, GridOf(s.cfg.Geometry))
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

// SetPrescaleSet chooses the prescale set from the next lumi slice on (as
// trigger.Selector.SetPrescaleSet does), of the menu waiting for that
// slice if LoadMenu left one waiting, else of the menu in force. It is
// safe for concurrent use.
func (s *Selector) SetPrescaleSet(name string) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.pending != nil {
		return s.pending.SetPrescaleSet(name)
	}
	return s.sel.Load().SetPrescaleSet(name)
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
// has sent its end-of-run batch and all its events are decided (with
// several workers: decided by the workers together, see Config.Workers),
// or ctx ends. It returns the first publishing error, if any.
func (s *Selector) Run(ctx context.Context) error {
	sub, err := transport.Subscribe(s.nc, s.cfg.Subjects.Built(), s.cfg.Subjects.SelectQueue(), s.onMsg)
	if err != nil {
		return fmt.Errorf("selector: %w", err)
	}
	if s.cfg.Workers > 1 {
		endSub, err := transport.Subscribe(s.nc, s.cfg.Subjects.BuiltEnd(), "", s.onEnd)
		if err != nil {
			_ = sub.Unsubscribe()
			return fmt.Errorf("selector: %w", err)
		}
		defer endSub.Unsubscribe()
		progSub, err := transport.Subscribe(s.nc, s.cfg.Subjects.SelectProgress(), "", s.onProgress)
		if err != nil {
			_ = sub.Unsubscribe()
			return fmt.Errorf("selector: %w", err)
		}
		defer progSub.Unsubscribe()
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
			if err == nil {
				err = s.reportLocked(false)
			}
			s.giveUpLocked(time.Now())
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
	// The others may still wait for this worker's last count.
	if err := s.reportLocked(true); err != nil {
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
	s.mu.Lock()
	defer s.mu.Unlock()
	h, err := s.decideBatch(msg.Data)
	if err != nil {
		// Events before the damage have been decided; the rest of the
		// batch is lost and counted with it.
		s.undecoded.Add(1)
		s.m.undecodable.Inc()
		s.log.Warn("undecodable event batch", "subject", msg.Subject, "error", err)
	} else if h.endOfRun && s.cfg.Workers <= 1 {
		s.ends++
		s.expected += h.total
	}
	if err := s.publishLocked(); err != nil && s.pubErr == nil {
		s.pubErr = err
	}
	s.checkFinishedLocked()
}

// onEnd takes a builder's end-of-run batch from the end subject (more than
// one worker).
func (s *Selector) onEnd(msg *nats.Msg) {
	h, err := walkBatch(msg.Data, nil)
	if err != nil || !h.endOfRun {
		s.log.Warn("undecodable end-of-run batch", "subject", msg.Subject, "error", err)
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	s.builderEnds[h.builder] = h.total
	// Tell the others at once: this worker may be done already.
	if err := s.reportLocked(true); err != nil && s.pubErr == nil {
		s.pubErr = err
	}
	s.checkFinishedLocked()
}

// onProgress takes another worker's decided count (more than one worker).
func (s *Selector) onProgress(msg *nats.Msg) {
	w, n, err := parseProgress(msg.Data)
	if err != nil {
		s.log.Warn("undecodable progress message", "subject", msg.Subject, "error", err)
		return
	}
	if w == s.cfg.Worker {
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	s.others[w] = max(s.others[w], n)
	s.checkFinishedLocked()
}

// reportLocked publishes this worker's decided count on the progress
// subject when it changed since the last report, or always with force.
// It does nothing for a single worker.
func (s *Selector) reportLocked(force bool) error {
	if s.cfg.Workers <= 1 || (!force && s.seen == s.reported) {
		return nil
	}
	s.progBuf = appendProgress(s.progBuf[:0], s.cfg.Worker, s.seen)
	if err := s.nc.Publish(s.cfg.Subjects.SelectProgress(), s.progBuf); err != nil {
		return fmt.Errorf("selector: publish progress: %w", err)
	}
	s.reported = s.seen
	return nil
}

// progressLocked reports whether every builder has ended, the events they
// announced in all, and how many of those are decided: by this worker
// alone, or with more than one worker by all of them together.
func (s *Selector) progressLocked() (ended bool, want, have uint64) {
	if s.cfg.Workers <= 1 {
		return s.ends >= s.cfg.Builders, s.expected, s.seen
	}
	for _, n := range s.builderEnds {
		want += n
	}
	have = s.seen
	for _, n := range s.others {
		have += n
	}
	return len(s.builderEnds) >= s.cfg.Builders, want, have
}

// checkFinishedLocked ends the run once every builder has ended and every
// event it emitted is decided.
func (s *Selector) checkFinishedLocked() {
	if ended, want, have := s.progressLocked(); ended && have >= want {
		s.finishLocked()
	}
}

func (s *Selector) finishLocked() {
	select {
	case <-s.finished:
	default:
		close(s.finished)
	}
}

// giveUpLocked ends the run when every builder has ended but events they
// announced are still missing and none has been decided for EndWait: they
// were lost on the way (Config.EndWait). With more than one worker, worker
// 0 counts them, so that the workers' counts add up.
func (s *Selector) giveUpLocked(now time.Time) {
	select {
	case <-s.finished:
		return // given up already, or done; count nothing twice
	default:
	}
	ended, want, have := s.progressLocked()
	if !ended || have >= want {
		s.waitSince = time.Time{}
		return
	}
	if s.waitSince.IsZero() || have != s.waitHave {
		s.waitSince, s.waitHave = now, have
		return
	}
	if now.Sub(s.waitSince) < s.cfg.EndWait {
		return
	}
	if s.cfg.Worker == 0 {
		s.lost = want - have
		s.m.lost.Add(float64(s.lost))
	}
	s.log.Warn("events announced by the builders never arrived; ending the run without them",
		"missing", want-have, "waited", s.cfg.EndWait)
	s.finishLocked()
}

// EventsLost returns how many events the builders announced that no
// worker decided, given up for lost at the end of the run (Config.EndWait;
// with more than one worker, counted by worker 0 only). It is safe for
// concurrent use.
func (s *Selector) EventsLost() uint64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.lost
}

// decideBatch decides every event of an encoded event batch. The events
// are decided back to back, so the clock is read once per event: the
// previous event's decision time (or the batch's start) is the next one's
// start, which charges the previous event's few bookkeeping steps to it;
// after publishing a batch of decisions the clock is read again. Called
// with s.mu held.
func (s *Selector) decideBatch(data []byte) (batchHeader, error) {
	s.clock = time.Now()
	h, err := walkBatch(data, s.decideWire)
	s.clock = time.Time{}
	return h, err
}

// decideWire decides one encoded built event, timed from s.clock (from
// now if it is not set). Called with s.mu held.
func (s *Selector) decideWire(raw []byte) error {
	start := s.clock
	if start.IsZero() {
		start = time.Now()
	}
	we := &s.we
	if err := we.decode(raw); err != nil {
		return err
	}
	sel := s.selectorFor(we.lumi)
	ok, err := s.table.fillWire(we.frags, we.lumi, &s.ev, &s.fill)
	if err != nil {
		return err
	}
	if !ok {
		// Not plain calorimeter fragments: FillEvent, the reference, on
		// the decoded fragments.
		frags, err := s.slab.decode(we.frags)
		if err != nil {
			return err
		}
		FillEvent(s.cfg.Geometry, frags, we.lumi, &s.ev)
	}
	s.finish(sel, eventMeta{run: we.run, orbit: we.orbit, bcid: we.bcid, lumi: we.lumi, flags: we.flags, readout: we.readout}, start)
	return nil
}

// eventMeta is what a decision copies from its event.
type eventMeta struct {
	run        uint32
	orbit      uint64
	bcid, lumi uint32
	flags      uint32
	readout    int64
}

// decide runs the menu on one built event. Called with s.mu held.
func (s *Selector) decide(be *pb.BuiltEvent) {
	start := time.Now()
	sel := s.selectorFor(be.LumiSlice)
	s.fillEvent(be)
	s.finish(sel, eventMeta{run: be.Run, orbit: be.Orbit, bcid: be.Bcid, lumi: be.LumiSlice, flags: be.Flags, readout: be.ReadoutUnixNs}, start)
}

// selectorFor returns the trigger selector for an event of lumi slice l,
// switching to a pending menu at the slice boundary. Called with s.mu held.
func (s *Selector) selectorFor(l uint32) *trigger.Selector {
	if s.pending != nil && l > s.pendingAfter {
		s.sel.Store(s.pending)
		s.streams = newStreamCounts(s.pending.Menu())
		s.pending = nil
	}
	s.decidedAny = true
	s.maxSlice = max(s.maxSlice, l)
	return s.sel.Load()
}

// finish decides on the event in s.ev and records the decision. Called
// with s.mu held.
func (s *Selector) finish(sel *trigger.Selector, e eventMeta, start time.Time) {
	sel.Decide(&s.ev, &s.dec)
	now := time.Now()
	if !s.clock.IsZero() {
		s.clock = now // the next event of the batch starts here
	}
	s.m.latency.Observe(now.Sub(start).Seconds())
	s.seen++
	s.events++
	d := s.nextDecision()
	d.Run, d.Orbit, d.Bcid, d.LumiSlice = e.run, e.orbit, e.bcid, e.lumi
	d.Accept, d.MenuHash, d.PrescaleSet, d.EventFlags = s.dec.Accept, s.dec.MenuHash, s.dec.PrescaleSet, e.flags
	d.Streams = append(d.Streams[:0], s.dec.Streams...)
	rules := d.Rules[:0]
	for i, n := range s.ruleNames(sel) {
		if s.dec.Passed[i] {
			var r *pb.RuleResult
			if len(rules) < cap(rules) && rules[:len(rules)+1][len(rules)] != nil {
				r = rules[:len(rules)+1][len(rules)]
			} else {
				r = &pb.RuleResult{}
			}
			r.Rule, r.Index, r.PassedBeforePrescale, r.PassedAfterPrescale = n, uint32(i), true, s.dec.Kept[i]
			rules = append(rules, r)
		}
	}
	d.Rules = rules
	s.streams.add(s.dec.Passed, s.dec.Kept)
	if s.dec.Accept {
		s.accepted++
		s.m.accepted.Inc()
	}
	s.m.decisions.Inc()
	if e.readout > 0 {
		e2e := time.Duration(now.UnixNano() - e.readout)
		s.EndToEnd.Record(e2e)
		if s.cfg.EndToEnd != nil {
			s.cfg.EndToEnd.Record(e2e)
		}
		s.m.endToEnd.Observe(e2e.Seconds())
	}
	if len(s.out.Decisions) >= s.cfg.BatchDecisions {
		if err := s.publishLocked(); err != nil && s.pubErr == nil {
			s.pubErr = err
		}
		if !s.clock.IsZero() {
			// Publishing is not the next event's selection time.
			s.clock = time.Now()
		}
	}
}

// nextDecision appends a decision to the outgoing batch, reusing one the
// batch held before it was last published. Called with s.mu held.
func (s *Selector) nextDecision() *pb.Decision {
	ds := s.out.Decisions
	if len(ds) < cap(ds) {
		if d := ds[:len(ds)+1][len(ds)]; d != nil {
			s.out.Decisions = ds[:len(ds)+1]
			return d
		}
	}
	d := &pb.Decision{}
	s.out.Decisions = append(ds, d)
	return d
}

// ruleNames returns the rule names of sel, cached: RuleNames allocates.
func (s *Selector) ruleNames(sel *trigger.Selector) []string {
	if s.namesOf != sel {
		s.names, s.namesOf = sel.RuleNames(), sel
	}
	return s.names
}

// fillEvent decodes the calorimeter fragments of be into s.ev.
func (s *Selector) fillEvent(be *pb.BuiltEvent) {
	FillEvent(s.cfg.Geometry, be.Fragments, be.LumiSlice, &s.ev)
}

// FillEvent decodes the payloads of fragments into ev, reusing its
// storage: calorimeter towers and muon-station hits (mm). The towers are
// trigger.GridTowers (ET from least counts, at their cell of g), or, for a
// geometry whose bins do not fit a GridTower, Towers with eta and phi at
// the tower centres of g; towers outside the grid or with zero counts are
// skipped. Either form gives the features of the Towers at the centres.
func FillEvent(g *detector.Geometry, fragments []*pb.Fragment, lumiSlice uint32, ev *trigger.Event) {
	ev.Towers = ev.Towers[:0]
	ev.GridTowers = ev.GridTowers[:0]
	ev.Counted.Words = ev.Counted.Words[:0]
	ev.MuonHits = ev.MuonHits[:0]
	ev.LumiSlice = lumiSlice
	grid := gridForm(g)
	for _, f := range fragments {
		if m := f.GetMuon(); m != nil {
			for _, h := range m.Hits {
				ev.MuonHits = append(ev.MuonHits, trigger.MuonHit{Station: int(h.Station), X: float64(h.XMm), Y: float64(h.YMm), Z: float64(h.ZMm)})
			}
			continue
		}
		calo := f.GetCalo()
		if calo == nil {
			continue
		}
		counts := calo.EtCounts
		for i, t := range calo.Towers {
			if i >= len(counts) {
				break
			}
			if counts[i] == 0 {
				continue
			}
			if !grid {
				if tw, ok := wideTower(g, t, counts[i]); ok {
					ev.Towers = append(ev.Towers, tw)
				}
				continue
			}
			layer, ieta, iphi, ok := g.TowerCoords(int(t))
			if !ok {
				continue
			}
			ev.GridTowers = append(ev.GridTowers, trigger.GridTower{ET: g.ET(counts[i]), IEta: uint16(ieta), IPhi: uint16(iphi), Layer: uint8(layer)})
		}
	}
}

// GridOf returns the selection's view of geometry g.
func GridOf(g *detector.Geometry) trigger.Grid {
	return trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep, FieldT: g.FieldT}
}

func (s *Selector) publishLocked() error {
	if len(s.out.Decisions) == 0 {
		return nil
	}
	s.out.Sequence = s.seq
	var err error
	s.outBuf, err = proto.MarshalOptions{}.MarshalAppend(s.outBuf[:0], s.out)
	if err != nil {
		return fmt.Errorf("selector: encode decisions: %w", err)
	}
	if err := s.nc.Publish(s.cfg.Subjects.Decisions(), s.outBuf); err != nil {
		return fmt.Errorf("selector: publish decisions: %w", err)
	}
	s.seq++
	// The decisions stay in the slice's storage, to be reused.
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
