package replay

import (
	"context"
	"errors"
	"fmt"
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
	// Workers is the number of goroutines that decode towers and compute
	// features, and of those that decode and checksum a stream's
	// fragment batches; zero means 2.
	Workers int
	// ChunkEvents is the number of events handed to a worker at once;
	// zero means 32.
	ChunkEvents int
	// Builder overrides the event builder's settings; Run, Sources and
	// SkipChecksum are always set from the source, and WhenFull is always
	// EvictOldest (a replay has nobody to push back on). Zero fields keep
	// the builder's defaults.
	Builder builder.Config
	// Progress, when set, is called from the deciding goroutine after each
	// chunk with the events decided so far and the share of the input
	// read (0..1).
	Progress func(events uint64, done float64)
}

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
// every event in emission order from a single goroutine. It starts
// Config.Workers worker goroutines and one feeding goroutine, and joins
// them all before it returns. Runs with distinct sources may proceed
// concurrently; a source serves one Run. A sink error
// stops the run and is returned. Run is deterministic: the same source
// and configuration give the same events and decisions, whatever
// Workers.
func Run(ctx context.Context, src Source, cfg Config, sink func(*Event) error) (Summary, error) {
	if len(cfg.Menus) == 0 {
		return Summary{}, ErrNoMenu
	}
	if cfg.Workers <= 0 {
		cfg.Workers = 2
	}
	if cfg.ChunkEvents <= 0 {
		cfg.ChunkEvents = 32
	}
	sample := src.Sample()
	g := sample.Description.Geometry
	grid := trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep}

	var sum Summary
	deciders := make([]*decider, len(cfg.Menus))
	for m, menu := range cfg.Menus {
		set := menu.ActiveSet
		if m < len(cfg.PrescaleSets) && cfg.PrescaleSets[m] != "" {
			set = cfg.PrescaleSets[m]
		}
		ps, err := menu.Prescales(set)
		if err != nil {
			return sum, fmt.Errorf("replay: menu %s: %w", menu.Name, err)
		}
		if m < len(cfg.Prescales) && cfg.Prescales[m] != nil {
			if len(cfg.Prescales[m]) != len(menu.Rules) {
				return sum, fmt.Errorf("replay: menu %s has %d rules, given %d prescales", menu.Name, len(menu.Rules), len(cfg.Prescales[m]))
			}
			ps = append([]int(nil), cfg.Prescales[m]...)
		}
		deciders[m] = &decider{prescale: ps, counters: make([]uint64, len(ps))}
		sum.PrescaleSets = append(sum.PrescaleSets, set)
	}
	// Each worker evaluates conditions with selectors of its own: only
	// their pass bits are used, and the prescales are applied in order by
	// the deciding goroutine, so worker timing cannot change what is kept.
	table := newTowerTable(g)
	workers := make([]*worker, cfg.Workers)
	for i := range workers {
		w := &worker{table: table, values: cfg.Values}
		for _, menu := range cfg.Menus {
			sel, err := trigger.NewSelector(menu, grid)
			if err != nil {
				return sum, fmt.Errorf("replay: %w", err)
			}
			w.sels = append(w.sels, sel)
		}
		w.feats = make([]trigger.Features, len(cfg.Menus))
		workers[i] = w
	}

	bc := cfg.Builder
	bc.Run = sample.Run
	bc.Sources = sample.Sources
	bc.SkipChecksum = sample.Kind == "generator"
	bc.WhenFull = builder.EvictOldest
	lumiOrbits := sample.Description.Config.LumiSliceOrbits
	if lumiOrbits == 0 {
		lumiOrbits = 1 << 18
	}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	const inFlight = 4
	free := make(chan *chunk, inFlight)
	ordered := make(chan *chunk, inFlight)
	work := make(chan *chunk, inFlight)
	nrules := make([]int, len(cfg.Menus))
	for m, menu := range cfg.Menus {
		nrules[m] = len(menu.Rules)
	}
	for range inFlight {
		free <- newChunk(cfg.ChunkEvents, nrules, len(cfg.Values))
	}

	pool := newFragmentPool()
	fd := &feeder{pool: pool, cache: pool.cache(), table: table, decoders: cfg.Workers, truth: make(map[uint64]*recording.TruthRecord),
		free: free, ordered: ordered, work: work, ctx: ctx, lumiOrbits: lumiOrbits}
	b, err := builder.New(bc, fd.emit)
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
	ev := Event{Passed: make([][]bool, len(cfg.Menus)), Kept: make([][]bool, len(cfg.Menus)), Accept: make([]bool, len(cfg.Menus))}
	for m := range cfg.Menus {
		ev.Kept[m] = make([]bool, nrules[m])
	}
	var decided uint64
	for c := range ordered {
		<-c.ready
		if sinkErr == nil {
			for i := range c.n {
				e := &c.events[i]
				ev.Seq, ev.Run, ev.Orbit, ev.Bcid, ev.LumiSlice = decided, sample.Run, e.orbit, e.bcid, e.lumi
				ev.Flags, ev.Missing, ev.Towers, ev.Truth = e.flags, e.missing, e.towers, e.truth
				ev.Values = c.values[i*len(cfg.Values) : (i+1)*len(cfg.Values)]
				for m, d := range deciders {
					ev.Passed[m] = c.passed[m][i*nrules[m] : (i+1)*nrules[m]]
					ev.Accept[m] = d.apply(ev.Passed[m], ev.Kept[m])
				}
				decided++
				if err := sink(&ev); err != nil {
					sinkErr = err
					cancel()
					break
				}
			}
			if cfg.Progress != nil {
				cfg.Progress(decided, fd.done())
			}
		}
		free <- c
	}
	wg.Wait()
	err = <-feedErr
	sum.Events = decided
	sum.Builder = b.Stats()
	sum.Batches, sum.Undecodable = fd.batches, fd.undecodable
	sum.TruthRecords, sum.TruthMatched = fd.truthRecords, fd.truthMatched
	sum.InputError = fd.inputErr
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
	orbit      uint64
	bcid, lumi uint32
	flags      uint32
	missing    int
	towers     int
	truth      *recording.TruthRecord
	slots      []*slot // of the event's fragments
}

// chunk carries up to cap(events) events from the feeder through a
// worker to the deciding goroutine.
type chunk struct {
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
	nv := len(w.values)
	for i := range c.n {
		e := &c.events[i]
		if w.table.wide != nil {
			// A wide table has no fused slots; fill reads the fragments.
			w.frags = w.frags[:0]
			for _, s := range e.slots {
				w.frags = append(w.frags, &s.f)
			}
			w.table.fill(w.frags, e.lumi, &w.ev)
		} else {
			w.table.fillSlots(e.slots, e.lumi, &w.ev)
		}
		e.towers = w.ev.NumTowers()
		for m, sel := range w.sels {
			f := &w.feats[m]
			sel.ComputeFeatures(&w.ev, f)
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
}

// feeder is the goroutine that owns the builder: it takes fragments and
// truth records from the source, gathers emitted events into chunks and
// ships full chunks to the workers.
type feeder struct {
	ctx        context.Context
	b          *builder.Builder
	pool       *fragmentPool
	cache      *slotCache  // the feeder's own, for sources that make fragments
	table      *towerTable // for a source's decoders
	decoders   int         // goroutines a source may decode with
	truth      map[uint64]*recording.TruthRecord
	spare      []*recording.TruthRecord
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
	inputErr                   string
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

// addChecked is add for a fragment whose checksum a decoding goroutine
// has compared already: intact is the outcome.
func (fd *feeder) addChecked(f *pb.Fragment, intact bool) {
	if f.TimestampNs > fd.arrival {
		fd.arrival = f.TimestampNs
	}
	if err := fd.b.AddChecked(f, intact, fd.arrival, fd.arrival); err != nil {
		fd.pool.put(f)
	}
}

// addTruth keeps a copy of a truth record until its event is emitted.
func (fd *feeder) addTruth(rec *recording.TruthRecord) {
	fd.truthRecords++
	key := crossingKey(rec.Orbit, rec.Bcid)
	t := fd.truth[key]
	if t == nil {
		if n := len(fd.spare); n > 0 {
			t, fd.spare = fd.spare[n-1], fd.spare[:n-1]
		} else {
			t = new(recording.TruthRecord)
		}
		fd.truth[key] = t
	}
	hard, objs := t.Truth.Hard[:0], t.Truth.Objects[:0]
	*t = *rec
	t.Truth.Hard = append(hard, rec.Truth.Hard...)
	t.Truth.Objects = append(objs, rec.Truth.Objects...)
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
	e.truth = fd.truth[key]
	if e.truth != nil {
		delete(fd.truth, key)
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
				fd.spare = append(fd.spare, e.truth)
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

func (fd *feeder) inputError(err error) { fd.inputErr = err.Error() }

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
