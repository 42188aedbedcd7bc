package stack

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"time"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/summary"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Phase is the state of the controlled chain, in our own words.
type Phase int

// The phases and what moves between them:
//
//	idle     --configure-->  ready
//	ready    --configure-->  ready
//	ready    --start------>  flowing
//	flowing  --stop------->  draining  (in-flight crossings drain)
//	flowing  (limit reached) draining
//	draining (drained)   ->  ready     (the run number moves on by one)
//	draining (failed)    ->  faulted
//	faulted  --configure-->  ready
const (
	Idle Phase = iota + 1
	Ready
	Flowing
	Draining
	Faulted
)

func (p Phase) String() string {
	switch p {
	case Idle:
		return "idle"
	case Ready:
		return "ready"
	case Flowing:
		return "flowing"
	case Draining:
		return "draining"
	case Faulted:
		return "faulted"
	}
	return fmt.Sprintf("phase(%d)", int(p))
}

// ErrNotAllowed is wrapped by every refusal of an operation in the current
// phase.
var ErrNotAllowed = errors.New("not allowed in this phase")

// ErrInvalid is wrapped by refusals of bad arguments (a menu that does not
// parse, an unknown prescale set, a bad setting).
var ErrInvalid = errors.New("invalid argument")

// TransitionError says which operation the phase refused.
type TransitionError struct {
	Op    string
	Phase Phase
}

func (e *TransitionError) Error() string {
	return fmt.Sprintf("stack: cannot %s while %s", e.Op, e.Phase)
}

func (e *TransitionError) Unwrap() error { return ErrNotAllowed }

// RunSettings is what Configure sets for the next runs.
type RunSettings struct {
	Run runconfig.Config
	// Menu is the menu; nil means Run.LoadMenu().
	Menu *trigger.Menu
	// PrescaleSet is the set to start with; empty means the menu's active
	// set.
	PrescaleSet string
	// Crossings and Duration end a run by themselves; zero means a run
	// flows until stopped.
	Crossings uint64
	Duration  time.Duration
}

// Status is the controller's view of the run.
type Status struct {
	Phase       Phase
	Run         uint32
	LumiSlice   uint32
	MenuName    string
	MenuHash    string
	PrescaleSet string
	// PendingMenu and PendingPrescaleSet wait for the next lumi slice.
	PendingMenu        string
	PendingPrescaleSet string
	Crossings          uint64
	EventsBuilt        uint64
	Accepted           uint64
	// Uptime is how long the current run has been flowing and draining;
	// zero outside a run.
	Uptime time.Duration
	Detail string
}

// Controller steers runs on a host: configure, start, stop, swap menus and
// prescale sets. It is safe for concurrent use.
type Controller struct {
	host *Host

	mu       sync.Mutex
	phase    Phase
	settings RunSettings
	chain    *Chain
	stop     context.CancelFunc
	done     chan struct{}
	last     *summary.Summary
	detail   string
}

// NewController returns a controller in phase idle on host.
func NewController(host *Host) *Controller {
	c := &Controller{host: host, phase: Idle}
	host.run.set(func() runState {
		st := c.Status()
		rs := runState{phase: st.Phase.String(), run: st.Run}
		if chain := c.Chain(); chain != nil && (st.Phase == Flowing || st.Phase == Draining) {
			chain.mu.Lock()
			rs.start = chain.started
			chain.mu.Unlock()
		}
		return rs
	})
	return c
}

// Configure validates settings and makes them the next run's. Allowed when
// idle, ready or faulted.
func (c *Controller) Configure(s RunSettings) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.phase == Flowing || c.phase == Draining {
		return &TransitionError{Op: "configure", Phase: c.phase}
	}
	if err := s.Run.Validate(); err != nil {
		return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
	}
	if s.Menu == nil {
		m, err := s.Run.LoadMenu()
		if err != nil {
			return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
		}
		s.Menu = m
	}
	if err := checkSet(s.Menu, s.PrescaleSet); err != nil {
		return err
	}
	c.settings, c.phase, c.detail = s, Ready, ""
	return nil
}

// Settings returns the next run's settings, and false while none are
// configured (idle). It is safe for concurrent use.
func (c *Controller) Settings() (RunSettings, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.settings, c.phase != Idle
}

func checkSet(m *trigger.Menu, set string) error {
	if set == "" {
		return nil
	}
	if _, err := m.Prescales(set); err != nil {
		return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
	}
	return nil
}

// Start begins a run with the configured settings. Allowed when ready.
func (c *Controller) Start() error {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.phase != Ready {
		return &TransitionError{Op: "start", Phase: c.phase}
	}
	s := c.settings
	// Refuse before the new run's metrics replace the last run's.
	if err := checkSet(s.Menu, s.PrescaleSet); err != nil {
		return err
	}
	chain, err := c.host.NewChain(ChainOptions{Run: s.Run, Menu: s.Menu, Crossings: s.Crossings, Duration: s.Duration})
	if err != nil {
		c.reattach()
		return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
	}
	if s.PrescaleSet != "" {
		if err := chain.Selector().Trigger().SetPrescaleSet(s.PrescaleSet); err != nil {
			chain.Close()
			c.reattach()
			return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
		}
	}
	if c.chain != nil {
		c.chain.Close()
	}
	ctx, cancel := context.WithCancel(context.Background())
	c.chain, c.stop, c.done, c.phase, c.detail = chain, cancel, make(chan struct{}), Flowing, ""
	go c.run(chain, ctx, c.done)
	return nil
}

// reattach puts the last run's metrics back on the host after a start
// that failed once the new run's had replaced them. Called with c.mu held.
func (c *Controller) reattach() {
	if c.chain != nil {
		c.host.attach(c.chain.reg)
	}
}

func (c *Controller) run(chain *Chain, ctx context.Context, done chan struct{}) {
	defer close(done)
	sum, err := chain.Run(ctx)
	c.mu.Lock()
	defer c.mu.Unlock()
	c.last = sum
	c.stop()
	if err != nil {
		c.phase, c.detail = Faulted, err.Error()
		return
	}
	c.phase = Ready
	c.detail = fmt.Sprintf("run %d ended: %d crossings, %d events, %d accepted", sum.Run, sum.Crossings, sum.EventsBuilt, sum.Accepted)
	c.settings.Run.Run++
}

// Stop ends offering and drains the crossings in flight; the run is over
// when Status says ready again (or Wait returns). Allowed when flowing.
func (c *Controller) Stop() error {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.phase != Flowing {
		return &TransitionError{Op: "stop", Phase: c.phase}
	}
	c.phase = Draining
	c.stop()
	return nil
}

// Wait blocks until the current run (if any) has drained, or ctx ends.
func (c *Controller) Wait(ctx context.Context) error {
	c.mu.Lock()
	done := c.done
	c.mu.Unlock()
	if done == nil {
		return nil
	}
	select {
	case <-done:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// LoadMenu validates a menu and makes it the menu: from the next lumi slice
// when flowing, from the next run otherwise. Not allowed while draining.
// With prescaleSet empty a set the operator chose stays in force when the
// new menu has a set of that name (a revised menu must not undo the rates
// an operator chose); otherwise the new menu's active set is taken.
func (c *Controller) LoadMenu(m *trigger.Menu, prescaleSet string) error {
	if err := checkSet(m, prescaleSet); err != nil {
		return err
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if prescaleSet == "" {
		prescaleSet = c.keptSet(m)
	}
	switch c.phase {
	case Flowing:
		if err := c.chain.Selector().LoadMenu(m, prescaleSet); err != nil {
			return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
		}
	case Draining:
		return &TransitionError{Op: "load a menu", Phase: c.phase}
	}
	c.settings.Menu, c.settings.PrescaleSet = m, prescaleSet
	if c.phase == Idle {
		c.settings.Run = runconfig.Default()
		c.phase = Ready
	}
	return nil
}

// keptSet returns the set LoadMenu takes for m when none is named: the set
// an operator chose (Configure, SetPrescaleSet or an earlier LoadMenu) if m
// has one of that name, else "" for m's active set. A menu's own active
// set is not a choice: a new menu starts in the set its author named.
func (c *Controller) keptSet(m *trigger.Menu) string {
	if cur := c.settings.PrescaleSet; cur != "" {
		if _, err := m.Prescales(cur); err == nil {
			return cur
		}
	}
	return ""
}

// SetPrescaleSet chooses the prescale set: from the next lumi slice when
// flowing, from the next run otherwise. Not allowed while draining or
// before a menu is configured.
func (c *Controller) SetPrescaleSet(name string) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	switch c.phase {
	case Idle, Draining:
		return &TransitionError{Op: "choose a prescale set", Phase: c.phase}
	case Flowing:
		// With a new menu waiting, the set is the new menu's, which takes
		// over at the same boundary.
		if err := c.chain.Selector().SetPrescaleSet(name); err != nil {
			return fmt.Errorf("stack: %w: %v", ErrInvalid, err)
		}
	default:
		if err := checkSet(c.settings.Menu, name); err != nil {
			return err
		}
	}
	c.settings.PrescaleSet = name
	return nil
}

// Status returns the phase and the counts of the current or last run.
func (c *Controller) Status() Status {
	c.mu.Lock()
	defer c.mu.Unlock()
	st := Status{Phase: c.phase, Run: c.settings.Run.Run, Detail: c.detail}
	if m := c.settings.Menu; m != nil {
		st.MenuName, st.MenuHash, st.PrescaleSet = m.Name, m.Hash, c.settings.PrescaleSet
	}
	if c.chain != nil && (c.phase == Flowing || c.phase == Draining) {
		st.Run = c.chain.Config().Run
		st.Uptime = c.chain.Elapsed()
		sel := c.chain.Selector()
		t := sel.Trigger()
		ps := t.PrescaleStatus()
		st.MenuName, st.MenuHash, st.PrescaleSet = t.Menu().Name, t.Menu().Hash, ps.Set
		st.PendingPrescaleSet = ps.Pending
		st.PendingMenu, _ = sel.PendingMenu()
		st.LumiSlice = sel.LumiSlice()
		b := c.chain.Builder().Stats()
		st.Crossings, st.EventsBuilt, st.Accepted = c.chain.Emulator().Offered(), b.EventsComplete+b.EventsIncomplete, sel.Accepted()
	} else if c.last != nil {
		st.Crossings, st.EventsBuilt, st.Accepted = c.last.Crossings, c.last.EventsBuilt, c.last.Accepted
	}
	return st
}

// Chain returns the current or last run's chain, or nil before the first.
func (c *Controller) Chain() *Chain {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.chain
}

// LastSummary returns the summary of the last finished run, or nil.
func (c *Controller) LastSummary() *summary.Summary {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.last
}

// Close stops a flowing run, waits for it to drain (bounded by ctx) and
// closes its connections. The host stays open.
func (c *Controller) Close(ctx context.Context) error {
	c.mu.Lock()
	if c.phase == Flowing {
		c.phase = Draining
		c.stop()
	}
	c.mu.Unlock()
	err := c.Wait(ctx)
	c.mu.Lock()
	if c.chain != nil {
		c.chain.Close()
	}
	c.mu.Unlock()
	return err
}
