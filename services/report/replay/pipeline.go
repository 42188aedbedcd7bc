package replay

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"sync"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Config sets up a Run. Menus must hold at least one menu; every other
// field works at its zero value.
type Config struct {
	// Menus are the menus to decide every event with. The first one's
	// features give Values.
	Menus []*trigger.Menu
	// PrescaleSets names the prescale set of each menu; a missing or
	// empty entry means the menu's active set.
	PrescaleSets []string
	// Prescales, where an entry is non-nil, gives the prescale of every
	// rule of that menu in order (0: off), in place of its prescale set.
	Prescales [][]int
	// Values are computed for every event from the first menu's features.
	Values []Quantity
	// Workers is the number of lanes a stream replays on (each reads the
	// stream and builds a share of its events; the calling goroutine
	// decides what they leave it and delivers), zero meaning one fewer
	// than GOMAXPROCS, at least one; or, for a generator, the number of
	// goroutines that decode towers and compute features, zero meaning 2.
	Workers int
	// ChunkEvents is the number of events handed to a worker, or from a
	// lane to the deciding goroutine, at once; zero means 32.
	ChunkEvents int
	// Builder overrides the event builder's settings; Run, Sources and
	// SkipChecksum are always set from the source, and WhenFull is always
	// EvictOldest (a replay has nobody to push back on). Zero fields keep
	// the builder's defaults.
	Builder builder.Config
	// Progress, when set, is called from the calling goroutine after each
	// chunk with the events decided so far and the share of the input
	// read (0..1).
	Progress func(events uint64, done float64)

	// handOver, for tests, overrides which events lanes leave to the
	// calling goroutine to decide.
	handOver handOverMode
}

// handOverMode says which events a lane leaves undecided.
type handOverMode uint8

const (
	handOverAdaptive handOverMode = iota // while the deciding goroutine keeps up (lane.handOver)
	handOverNone
	handOverAll
)

// Summary is the accounting of a Run.
type Summary struct {
	// Events is the number of events decided: one per crossing that any
	// source reported.
	Events uint64
	// Builder is the event builder's final accounting.
	Builder builder.Stats
	// Batches and Undecodable count the stream's fragment batches and
	// those that did not decode (skipped, and counted here).
	Batches, Undecodable uint64
	// TruthRecords counts truth records read; TruthMatched those that
	// found their event.
	TruthRecords, TruthMatched uint64
	// InputError describes damage that stopped reading a stream early;
	// empty when the whole input was read.
	InputError string
	// PrescaleSets are the prescale sets used, per menu.
	PrescaleSets []string
}

// ErrNoMenu is returned by Run without a menu.
var ErrNoMenu = errors.New("replay: no menu to decide with")

// Run replays src through the builder and the menus, calling sink for
// every event in emission order from the calling goroutine. It starts
// Config.Workers lanes for a stream (lanes.go), or Config.Workers workers
// and a feeding goroutine for a generator, and joins them all before it
// returns. Runs with distinct sources may proceed
// concurrently; a source serves one Run. A sink error
// stops the run and is returned. Run is deterministic: the same source
// and configuration give the same events and decisions, whatever
// Workers.
func Run(ctx context.Context, src Source, cfg Config, sink func(*Event) error) (Summary, error) {
	if _, stream := src.(*StreamSource); stream && cfg.Workers <= 0 {
		// The calling goroutine decides and writes the report on a
		// processor of its own.
		cfg.Workers = max(1, runtime.GOMAXPROCS(0)-1)
	}
	p, err := newPlan(src.Sample(), cfg)
	if err != nil {
		return Summary{}, err
	}
	switch s := src.(type) {
	case *StreamSource:
		return p.runLanes(ctx, s, sink)
	case *GeneratorSource:
		return p.runPipeline(ctx, s, sink)
	}
	return Summary{}, fmt.Errorf("replay: unknown source %T", src)
}

// plan is what every way of running a replay shares: the settings with
// their defaults, the tower table, the prescales and the builder's
// configuration.
type plan struct {
	cfg          Config
	sample       Sample
	grid         trigger.Grid
	table        *towerTable
	prescales    [][]int
	prescaleSets []string
	nrules       []int
	bc           builder.Config
	lumiOrbits   uint64
}

func newPlan(sample Sample, cfg Config) (*plan, error) {
	if len(cfg.Menus) == 0 {
		return nil, ErrNoMenu
	}
	if cfg.Workers <= 0 {
		cfg.Workers = 2
	}
	if cfg.ChunkEvents <= 0 {
		cfg.ChunkEvents = 32
	}
	g := sample.Description.Geometry
	p := &plan{cfg: cfg, sample: sample, table: newTowerTable(g),
		grid: trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep}}
	for m, menu := range cfg.Menus {
		set := menu.ActiveSet
		if m < len(cfg.PrescaleSets) && cfg.PrescaleSets[m] != "" {
			set = cfg.PrescaleSets[m]
		}
		ps, err := menu.Prescales(set)
		if err != nil {
			return nil, fmt.Errorf("replay: menu %s: %w", menu.Name, err)
		}
		if m < len(cfg.Prescales) && cfg.Prescales[m] != nil {
			if len(cfg.Prescales[m]) != len(menu.Rules) {
				return nil, fmt.Errorf("replay: menu %s has %d rules, given %d prescales", menu.Name, len(menu.Rules), len(cfg.Prescales[m]))
			}
			ps = append([]int(nil), cfg.Prescales[m]...)
		}
		p.prescales = append(p.prescales, ps)
		p.prescaleSets = append(p.prescaleSets, set)
		p.nrules = append(p.nrules, len(menu.Rules))
	}
	p.bc = cfg.Builder
	p.bc.Run = sample.Run
	p.bc.Sources = sample.Sources
	p.bc.SkipChecksum = sample.Kind == "generator"
	p.bc.WhenFull = builder.EvictOldest
	p.lumiOrbits = sample.Description.Config.LumiSliceOrbits
	if p.lumiOrbits == 0 {
		p.lumiOrbits = 1 << 18
	}
	return p, nil
}

// newWorker returns a worker with selectors of its own. Each worker
// evaluates conditions only: their pass bits are used, and the prescales
// are applied in order by the deciding goroutine, so worker timing cannot
// change what is kept.
func (p *plan) newWorker() (*worker, error) {
	w := &worker{table: p.table, values: p.cfg.Values}
	for _, menu := range p.cfg.Menus {
		sel, err := trigger.NewSelector(menu, p.grid)
		if err != nil {
			return nil, fmt.Errorf("replay: %w", err)
		}
		w.sels = append(w.sels, sel)
	}
	w.feats = make([]trigger.Features, len(p.cfg.Menus))
	return w, nil
}

func (p *plan) newChunk() *chunk {
	return newChunk(p.cfg.ChunkEvents, p.nrules, len(p.cfg.Values))
}

// summary starts a Summary with what the plan knows.
func (p *plan) summary() Summary {
	return Summary{PrescaleSets: p.prescaleSets}
}

// delivery hands decided events to the sink in emission order, applying
// each menu's prescales as it goes. It is used by the deciding goroutine.
type delivery struct {
	p        *plan
	sink     func(*Event) error
	deciders []*decider
	ev       Event
	decided  uint64
	// w decides the events that come undecided (lanes.go); nil where
	// every event comes decided.
	w *worker
}

func (p *plan) newDelivery(sink func(*Event) error, w *worker) *delivery {
	n := len(p.cfg.Menus)
	d := &delivery{p: p, sink: sink, w: w, ev: Event{Passed: make([][]bool, n), Kept: make([][]bool, n), Accept: make([]bool, n)}}
	for m, ps := range p.prescales {
		d.deciders = append(d.deciders, &decider{prescale: ps, counters: make([]uint64, len(ps))})
		d.ev.Kept[m] = make([]bool, p.nrules[m])
	}
	return d
}

// event delivers event i of c, the next one in emission order.
func (d *delivery) event(c *chunk, i int) error {
	e, ev := &c.events[i], &d.ev
	if !e.decided {
		d.w.decide(c, i, &e.ev)
	}
	nv := len(d.p.cfg.Values)
	ev.Seq, ev.Run, ev.Orbit, ev.Bcid, ev.LumiSlice = d.decided, d.p.sample.Run, e.orbit, e.bcid, e.lumi
	ev.Flags, ev.Missing, ev.Towers, ev.Truth = e.flags, e.missing, e.towers, e.truth
	ev.Values = c.values[i*nv : (i+1)*nv]
	for m, dc := range d.deciders {
		n := d.p.nrules[m]
		ev.Passed[m] = c.passed[m][i*n : (i+1)*n]
		ev.Accept[m] = dc.apply(ev.Passed[m], ev.Kept[m])
	}
	d.decided++
	return d.sink(ev)
}

// runPipeline runs a replay in stages: the source feeds the builder on
// one goroutine, Config.Workers workers fill towers and compute features
// chunk by chunk, and the calling goroutine delivers the chunks in order.
func (p *plan) runPipeline(ctx context.Context, src *GeneratorSource, sink func(*Event) error) (Summary, error) {
	cfg := p.cfg
	sum := p.summary()
	workers := make([]*worker, cfg.Workers)
	for i := range workers {
		w, err := p.newWorker()
		if err != nil {
			return sum, err
		}
		workers[i] = w
	}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	const inFlight = 4
	free := make(chan *chunk, inFlight)
	ordered := make(chan *chunk, inFlight)
	work := make(chan *chunk, inFlight)
	for range inFlight {
		free <- p.newChunk()
	}

	pool := newFragmentPool()
	fd := &feeder{pool: pool, cache: pool.cache(),
		free: free, ordered: ordered, work: work, ctx: ctx, lumiOrbits: p.lumiOrbits}
	b, err := builder.New(p.bc, fd.emit)
	if err != nil {
		return sum, fmt.Errorf("replay: %w", err)
	}
	fd.b = b

	var wg sync.WaitGroup
	for _, w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for c := range work {
				w.process(c)
				close(c.ready)
			}
		}()
	}

	feedErr := make(chan error, 1)
	go func() {
		err := src.feed(ctx, fd)
		if err == nil {
			fd.b.Flush()
			fd.ship()
		}
		close(work)
		close(ordered)
		feedErr <- err
	}()

	var sinkErr error
	d := p.newDelivery(sink, nil)
	for c := range ordered {
		<-c.ready
		if sinkErr == nil {
			for i := range c.n {
				if err := d.event(c, i); err != nil {
					sinkErr = err
					cancel()
					break
				}
			}
			if cfg.Progress != nil {
				cfg.Progress(d.decided, fd.done())
			}
		}
		free <- c
	}
	wg.Wait()
	err = <-feedErr
	sum.Events = d.decided
	sum.Builder = b.Stats()
	sum.Batches, sum.Undecodable = fd.batches, fd.undecodable
	sum.TruthRecords, sum.TruthMatched = fd.truthRecords, fd.truthMatched
	switch {
	case sinkErr != nil:
		return sum, sinkErr
	case err != nil:
		return sum, err
	}
	return sum, nil
}

// decider applies one menu's prescales in event order, with the
// selection library's counter rule: of the passes of a rule with
// prescale P > 1, the P-th, 2P-th, ... are kept; P = 1 keeps every pass
// and P = 0 (off) none.
type decider struct {
	prescale []int
	counters []uint64
}

func (d *decider) apply(passed, kept []bool) bool {
	accept := false
	for i, p := range passed {
		k := false
		if p {
			switch ps := d.prescale[i]; {
			case ps == 1:
				k = true
			case ps > 1:
				d.counters[i]++
				k = d.counters[i]%uint64(ps) == 0
			}
		}
		kept[i] = k
		accept = accept || k
	}
	return accept
}

// chunkEvent is what the feeder records of one emitted event.
type chunkEvent struct {
	seq        uint64 // emission order (lanes)
	orbit      uint64
	bcid, lumi uint32
	flags      uint32
	missing    int
	towers     int
	truth      *recording.TruthRecord
	slots      []*slot // of the event's fragments
	// decided is set once the event's conditions are in the chunk's
	// passed and values; until then ev holds its towers and hits, filled
	// by the lane that built it, for the deciding goroutine (lanes.go).
	decided bool
	ev      trigger.Event
}

// chunk carries up to cap(events) events from the feeder through a
// worker to the deciding goroutine.
type chunk struct {
	lane   int    // the lane that made it (lanes)
	upTo   uint64 // the events its lane had built when it shipped it (lanes)
	n      int
	events []chunkEvent
	passed [][]bool // per menu, events x rules
	values []float64
	ready  chan struct{}
}

func newChunk(size int, nrules []int, nvalues int) *chunk {
	c := &chunk{events: make([]chunkEvent, size), values: make([]float64, size*nvalues)}
	for _, n := range nrules {
		c.passed = append(c.passed, make([]bool, size*n))
	}
	return c
}

// worker decodes towers and evaluates conditions. Each worker owns its
// selectors and features; it is used by one goroutine.
type worker struct {
	table  *towerTable
	frags  []*pb.Fragment // scratch, for a wide table
	sels   []*trigger.Selector
	feats  []trigger.Features
	ev     trigger.Event
	dec    trigger.Decision
	values []Quantity
}

func (w *worker) process(c *chunk) {
	for i := range c.n {
		w.event(c, i)
	}
}

// event fills the towers of event i of c and evaluates every menu's
// conditions on it.
func (w *worker) event(c *chunk, i int) {
	w.fill(&c.events[i], &w.ev)
	w.decide(c, i, &w.ev)
}

// fill fills ev with the towers and muon hits of the fragments of e.
func (w *worker) fill(e *chunkEvent, ev *trigger.Event) {
	if w.table.wide != nil {
		// A wide table has no fused slots; fill reads the fragments.
		w.frags = w.frags[:0]
		for _, s := range e.slots {
			w.frags = append(w.frags, &s.f)
		}
		w.table.fill(w.frags, e.lumi, ev)
	} else {
		w.table.fillSlots(e.slots, e.lumi, ev)
	}
	e.towers = ev.NumTowers()
}

// decide evaluates every menu's conditions on ev, the filled event i of
// c, into c.
func (w *worker) decide(c *chunk, i int, ev *trigger.Event) {
	nv := len(w.values)
	e := &c.events[i]
	e.decided = true
	for m, sel := range w.sels {
		f := &w.feats[m]
		sel.ComputeFeatures(ev, f)
		sel.DecideFeatures(f, e.lumi, &w.dec)
		n := len(w.dec.Passed)
		copy(c.passed[m][i*n:(i+1)*n], w.dec.Passed)
		if m == 0 {
			for k, q := range w.values {
				c.values[i*nv+k] = q.Eval(f)
			}
		}
	}
}

// feeder is the goroutine that owns the builder: it takes fragments and
// truth records from the source, gathers emitted events into chunks and
// ships full chunks to the workers.
type feeder struct {
	ctx        context.Context
	b          *builder.Builder
	pool       *fragmentPool
	cache      *slotCache // the feeder's own, for the generator's fragments
	truth      truthStore
	free       chan *chunk
	ordered    chan *chunk
	work       chan *chunk
	cur        *chunk
	lumiOrbits uint64
	arrival    int64
	frac       float64
	fracMu     sync.Mutex

	batches, undecodable       uint64
	truthRecords, truthMatched uint64
}

func crossingKey(orbit uint64, bcid uint32) uint64 {
	return orbit*detector.SlotsPerOrbit + uint64(bcid)
}

// add offers f to the builder. Arrival time is taken as the largest
// fragment time so far, so dead-source detection runs in event time and
// the replay never reads a clock.
func (fd *feeder) add(f *pb.Fragment) {
	if f.TimestampNs > fd.arrival {
		fd.arrival = f.TimestampNs
	}
	if err := fd.b.Add(f, fd.arrival, fd.arrival); err != nil {
		fd.pool.put(f)
	}
}

// addTruth keeps a copy of a truth record until its event is emitted.
func (fd *feeder) addTruth(rec *recording.TruthRecord) {
	fd.truthRecords++
	fd.truth.keep(crossingKey(rec.Orbit, rec.Bcid), rec)
}

// emit is the builder's callback: it records the event into the current
// chunk and ships the chunk when full.
func (fd *feeder) emit(be *builder.Event) {
	if fd.cur == nil {
		fd.cur = fd.takeChunk()
		if fd.cur == nil {
			// Cancelled: drop the event's fragments back into the pool.
			fd.pool.putAll(be.Fragments)
			return
		}
	}
	c := fd.cur
	e := &c.events[c.n]
	e.orbit, e.bcid, e.flags, e.missing = be.Orbit, be.Bcid, be.Flags, len(be.Missing)
	e.lumi = uint32(be.Orbit/fd.lumiOrbits) + 1
	// The slots, looked up once here, carry what the workers read (a
	// fused fragment's towers) and go back to the pool without a lookup.
	e.slots = fd.pool.slotsOf(e.slots[:0], be.Fragments)
	key := crossingKey(be.Orbit, be.Bcid)
	if e.truth = fd.truth.take(key); e.truth != nil {
		fd.truthMatched++
	}
	c.n++
	if c.n == len(c.events) {
		fd.ship()
	}
}

// takeChunk returns a free chunk with the fragments and truth records of
// its previous use back in the pools, or nil once the run is cancelled.
func (fd *feeder) takeChunk() *chunk {
	select {
	case c := <-fd.free:
		for i := range c.events {
			e := &c.events[i]
			fd.pool.putSlots(e.slots)
			e.slots = e.slots[:0]
			if e.truth != nil {
				fd.truth.recycle(e.truth)
				e.truth = nil
			}
		}
		c.n = 0
		c.ready = make(chan struct{})
		return c
	case <-fd.ctx.Done():
		return nil
	}
}

// ship sends the current chunk, if it holds events, to the workers and
// the deciding goroutine.
func (fd *feeder) ship() {
	c := fd.cur
	if c == nil || c.n == 0 {
		return
	}
	fd.cur = nil
	select {
	case fd.ordered <- c:
	case <-fd.ctx.Done():
		return
	}
	fd.work <- c
}

func (fd *feeder) progress(f float64) {
	fd.fracMu.Lock()
	fd.frac = f
	fd.fracMu.Unlock()
}

func (fd *feeder) done() float64 {
	fd.fracMu.Lock()
	defer fd.fracMu.Unlock()
	return fd.frac
}
