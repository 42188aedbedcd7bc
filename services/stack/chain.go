package stack

import (
	"context"
	"errors"
	"fmt"
	"io"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/assembler"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/services/summary"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// ChainOptions set up one run on a host.
type ChainOptions struct {
	Run runconfig.Config
	// Menu is the menu to select with; nil means Run.LoadMenu().
	Menu *trigger.Menu
	// Crossings stops offering after this many crossings; zero means no
	// limit.
	Crossings uint64
	// Duration stops offering after this long; zero means no limit.
	Duration time.Duration
	// Status receives one status line per Run.StatusEvery; nil means none.
	Status io.Writer
	// DrainTimeout bounds the wait for in-flight crossings after offering
	// stopped; zero means 30 s.
	DrainTimeout time.Duration
}

// Chain is one run: readout, builder and selection on a host's NATS
// server, with their metrics on a registry of their own. Run may be called
// once; the accessors are safe for concurrent use.
type Chain struct {
	opts  ChainOptions
	host  *Host
	desc  *detector.Description
	menu  *trigger.Menu
	conns []*nats.Conn
	reg   *prometheus.Registry
	emu   *emulator.Emulator
	asm   *assembler.Assembler
	sel   *selector.Selector
	// sources is the number of sources sending fragments.
	sources int

	mu        sync.Mutex
	started   time.Time
	ended     time.Time
	offerDone bool
	once      sync.Once
}

// NewChain wires a run on h and attaches its metrics to h's /metrics.
func (h *Host) NewChain(opts ChainOptions) (*Chain, error) {
	if opts.DrainTimeout == 0 {
		opts.DrainTimeout = 30 * time.Second
	}
	if err := opts.Run.Validate(); err != nil {
		return nil, fmt.Errorf("stack: %w", err)
	}
	desc, err := opts.Run.LoadDetector()
	if err != nil {
		return nil, err
	}
	if opts.Menu == nil {
		if opts.Menu, err = opts.Run.LoadMenu(); err != nil {
			return nil, err
		}
	}
	c := &Chain{opts: opts, host: h, desc: desc, menu: opts.Menu, reg: prometheus.NewRegistry()}
	if err := c.wire(); err != nil {
		c.Close()
		return nil, err
	}
	h.attach(c.reg)
	return c, nil
}

func (c *Chain) conn(name string) (*nats.Conn, error) {
	nc, err := transport.ConnectInProcess(c.host.srv, name)
	if err != nil {
		return nil, err
	}
	c.conns = append(c.conns, nc)
	return nc, nil
}

func (c *Chain) wire() error {
	rc := c.opts.Run
	part, sources, err := rc.Readout(c.desc)
	if err != nil {
		return err
	}
	gen, err := rc.NewGenerator(c.desc, part)
	if err != nil {
		return err
	}
	c.sources = len(sources)
	ncE, err := c.conn("readout")
	if err != nil {
		return err
	}
	ncB, err := c.conn("builder")
	if err != nil {
		return err
	}
	ncS, err := c.conn("selection")
	if err != nil {
		return err
	}
	c.emu, err = emulator.New(emulator.Config{
		Run: rc.Run, Seed: rc.Seed, RateHz: rc.RateHz, Crossings: c.opts.Crossings, BatchCrossings: rc.BatchCrossings, Faults: rc.Faults,
		Partition: part,
	}, gen, sources, emulator.NewNATSSink(ncE, rc.Subjects()), c.reg)
	if err != nil {
		return err
	}
	lumi := rc.LumiSlice(c.desc)
	c.asm, err = assembler.New(assembler.Config{
		Builder: rc.BuilderConfig(sources), LumiSliceOrbits: lumi, Subjects: rc.Subjects(),
	}, ncB, c.reg)
	if err != nil {
		return err
	}
	c.sel, err = selector.New(selector.Config{Menu: c.menu, Geometry: c.desc.Geometry, Subjects: rc.Subjects()}, ncS, c.reg)
	return err
}

// Selector returns the run's selection worker (for menus and prescale sets).
func (c *Chain) Selector() *selector.Selector { return c.sel }

// Builder returns the run's builder service.
func (c *Chain) Builder() *assembler.Assembler { return c.asm }

// Emulator returns the run's readout emulator.
func (c *Chain) Emulator() *emulator.Emulator { return c.emu }

// Config returns the run configuration.
func (c *Chain) Config() runconfig.Config { return c.opts.Run }

// Description returns the detector description of the run.
func (c *Chain) Description() *detector.Description { return c.desc }

// Elapsed returns how long the run has been (or was) offering and
// draining; zero before it started.
func (c *Chain) Elapsed() time.Duration {
	c.mu.Lock()
	defer c.mu.Unlock()
	switch {
	case c.started.IsZero():
		return 0
	case c.ended.IsZero():
		return time.Since(c.started)
	}
	return c.ended.Sub(c.started)
}

// Run offers crossings until the crossing limit, the duration or stop ends
// offering, then drains in-flight crossings and returns the summary.
func (c *Chain) Run(stop context.Context) (*summary.Summary, error) {
	// The consumers keep running after offering stops, until the end-of-run
	// markers have travelled through; their context only bounds the drain.
	drain, cancelDrain := context.WithCancel(context.Background())
	defer cancelDrain()
	selDone := make(chan error, 1)
	asmDone := make(chan error, 1)
	go func() { selDone <- c.sel.Run(drain) }()
	go func() { asmDone <- c.asm.Run(drain) }()
	// Offer nothing until both consumers are subscribed: core NATS delivers
	// only to subscriptions that exist when a message is published.
	for _, ready := range []<-chan struct{}{c.asm.Ready(), c.sel.Ready()} {
		select {
		case <-ready:
		case err := <-asmDone:
			cancelDrain()
			return c.summary(), errors.Join(err, <-selDone)
		case err := <-selDone:
			cancelDrain()
			return c.summary(), errors.Join(err, <-asmDone)
		}
	}
	offer := stop
	if c.opts.Duration > 0 {
		var cancel context.CancelFunc
		offer, cancel = context.WithTimeout(stop, c.opts.Duration)
		defer cancel()
	}
	c.mu.Lock()
	c.started = time.Now()
	c.mu.Unlock()
	emuDone := make(chan error, 1)
	go func() { emuDone <- c.emu.Run(offer) }()

	st := newStatus(c)
	var tick <-chan time.Time
	if c.opts.Status != nil && c.opts.Run.StatusEvery > 0 {
		t := time.NewTicker(c.opts.Run.StatusEvery)
		defer t.Stop()
		tick = t.C
	}
	var firstErr error
	var drainTimer <-chan time.Time
	emuRunning, asmRunning, selRunning := true, true, true
	for selRunning || asmRunning || emuRunning {
		select {
		case err := <-emuDone:
			emuRunning = false
			c.mu.Lock()
			c.offerDone = true
			c.mu.Unlock()
			firstErr = errors.Join(firstErr, err)
			drainTimer = time.After(c.opts.DrainTimeout)
		case err := <-asmDone:
			asmRunning = false
			firstErr = errors.Join(firstErr, err)
		case err := <-selDone:
			selRunning = false
			firstErr = errors.Join(firstErr, err)
		case <-tick:
			st.line(c.opts.Status)
		case <-drainTimer:
			firstErr = errors.Join(firstErr, fmt.Errorf("stack: in-flight crossings not drained within %v", c.opts.DrainTimeout))
			cancelDrain()
			drainTimer = nil
		}
	}
	c.mu.Lock()
	c.ended = time.Now()
	c.mu.Unlock()
	return c.summary(), firstErr
}

// Summary returns the run's accounting so far.
func (c *Chain) Summary() *summary.Summary { return c.summary() }

func (c *Chain) summary() *summary.Summary {
	b := c.asm.Stats()
	rc := c.opts.Run
	sum := &summary.Summary{
		Run: rc.Run, Seed: rc.Seed, Sources: c.sources, DurationS: c.Elapsed().Seconds(),
		Crossings:   c.emu.Offered(),
		EventsBuilt: b.EventsComplete + b.EventsIncomplete, EventsComplete: b.EventsComplete, EventsIncomplete: b.EventsIncomplete,
		EventsDecided: c.sel.Events(),
		Fragments: summary.Fragments{
			Received: b.Received, InEvents: b.InEvents, Duplicate: b.Duplicate, Late: b.Late,
			Malformed: b.Malformed, UnknownSource: b.UnknownSource, OutOfTime: b.OutOfTime,
		},
		Transport: summary.Transport{
			FragmentBatchesDropped: c.asm.DroppedMessages(), EventBatchesDropped: c.sel.DroppedMessages(),
			FragmentBatchesUndecodable: c.asm.UndecodableMessages(), EventBatchesUndecodable: c.sel.UndecodableMessages(), EventsLost: c.sel.EventsLost(),
		},
		Accepted: c.sel.Accepted(),
		Latency: summary.Latency{
			BuildP50S: c.asm.Latency.Quantile(0.5).Seconds(), BuildP99S: c.asm.Latency.Quantile(0.99).Seconds(),
			EndToEndP50S: c.sel.EndToEnd.Quantile(0.5).Seconds(), EndToEndP99S: c.sel.EndToEnd.Quantile(0.99).Seconds(),
			EndToEndMaxS: c.sel.EndToEnd.Max().Seconds(),
		},
	}
	t := c.sel.Trigger()
	m := t.Menu()
	sum.Menu, sum.MenuHash = m.Name, m.Hash
	sum.PrescaleSet = t.PrescaleStatus().Set
	for _, rc := range c.sel.Counts() {
		sum.Rules = append(sum.Rules, summary.Rule{Name: rc.Name, Prescale: rc.Prescale, Passed: rc.Passed, Accepted: rc.Kept})
	}
	return sum
}

// Close closes the run's connections and detaches its metrics from the
// host. It is safe to call more than once.
func (c *Chain) Close() {
	c.once.Do(func() {
		for _, nc := range c.conns {
			nc.Close()
		}
		c.host.mu.Lock()
		if c.host.current == prometheus.Gatherer(c.reg) {
			c.host.current = nil
		}
		c.host.mu.Unlock()
	})
}

// state reports the chain's own phase: ready before it starts, flowing
// while offering, draining until the consumers finish, ready after.
func (c *Chain) state() runState {
	c.mu.Lock()
	defer c.mu.Unlock()
	st := runState{phase: "ready", run: c.opts.Run.Run, start: c.started}
	switch {
	case c.started.IsZero() || !c.ended.IsZero():
	case c.offerDone:
		st.phase = "draining"
	default:
		st.phase = "flowing"
	}
	return st
}
