package trigger

import (
	"fmt"
	"sync"
	"sync/atomic"
)

// Selector applies a menu to events. It is safe for concurrent use: any
// number of goroutines may call Decide at once. Each call borrows the
// working storage for features (a Features value and the evaluation state)
// from a sync.Pool inside the Selector, so in steady state Decide allocates
// nothing, apart from one small value at the first event of each new lumi
// slice (see SetPrescaleSet) and the buffers of a fresh Features when the
// pool has been emptied by a garbage collection or a goroutine needs one
// for the first time.
type Selector struct {
	menu    *Menu
	cfg     FeatureConfig
	rules   []selRule
	streams []selStream
	passed  []paddedCounter // per rule, over the Selector's life
	kept    []paddedCounter

	mu    sync.Mutex // serialises SetPrescaleSet
	state atomic.Pointer[prescaleState]
	pool  sync.Pool
}

type selRule struct {
	name     string
	cond     boolFn // nil: pass-through
	disabled bool
}

type selStream struct {
	name  string
	rules []int
}

// worker is the per-goroutine storage of one Decide call.
type worker struct {
	f   Features
	ctx evalCtx
}

// Decision is the outcome of one event. Decide fills it, reusing its
// slices.
type Decision struct {
	// Accept is true when some rule kept the event.
	Accept bool
	// Passed[i] reports whether rule i's condition held (before prescale);
	// Kept[i] whether rule i kept the event (after prescale). Menu order.
	Passed, Kept []bool
	// Streams names, in menu order, the streams with at least one rule
	// that kept the event.
	Streams []string
	// PrescaleSet is the prescale set used for this event.
	PrescaleSet string
	// MenuHash is the menu's Hash.
	MenuHash string
	// LumiSlice is the event's lumi slice.
	LumiSlice uint32
}

// RuleCount is the running count of one rule.
type RuleCount struct {
	Name string
	// Prescale is the rule's prescale in the set in force for the newest
	// lumi slice: 0 when off or disabled.
	Prescale int
	// Passed counts events whose condition held, Kept those kept after
	// prescale, over the Selector's life.
	Passed, Kept uint64
}

// NewSelector returns a Selector for m on grid g, starting with
// m.ActiveSet. It fails if m was not made by ParseMenu or if an algorithm
// of the menu cannot work on g.
func NewSelector(m *Menu, g Grid) (*Selector, error) {
	if m == nil || m.sch == nil {
		return nil, fmt.Errorf("trigger: NewSelector needs a menu made by ParseMenu")
	}
	cfg := m.Features
	cfg.Grid = g
	for _, cc := range cfg.Collections {
		if v, ok := cc.Algorithm.(GridValidator); ok {
			if err := v.ValidateGrid(g); err != nil {
				return nil, fmt.Errorf("trigger: collection %q: %w", cc.Name, err)
			}
		}
	}
	s := &Selector{menu: m, cfg: cfg, passed: make([]paddedCounter, len(m.Rules)), kept: make([]paddedCounter, len(m.Rules))}
	for _, r := range m.Rules {
		s.rules = append(s.rules, selRule{name: r.Name, cond: r.cond, disabled: r.Disabled})
	}
	for _, st := range m.Streams {
		ss := selStream{name: st.Name}
		for _, name := range st.Rules {
			ss.rules = append(ss.rules, m.RuleIndex(name))
		}
		s.streams = append(s.streams, ss)
	}
	ps, err := m.Prescales(m.ActiveSet)
	if err != nil {
		return nil, err
	}
	s.state.Store(&prescaleState{regimes: []*regime{newRegime(m.ActiveSet, 0, ps)}})
	ncoll := len(cfg.Collections)
	s.pool.New = func() any { return &worker{ctx: evalCtx{cur: make([]int, ncoll)}} }
	return s, nil
}

// Menu returns the menu the Selector applies.
func (s *Selector) Menu() *Menu { return s.menu }

// Decide computes the features of ev, evaluates every rule, applies the
// prescales of the set in force for ev.LumiSlice and fills d. It reuses
// d's slices. It is safe for concurrent use with distinct Decisions.
func (s *Selector) Decide(ev *Event, d *Decision) {
	w := s.pool.Get().(*worker)
	computeFeatures(ev, &s.cfg, &w.f)
	s.decide(&w.f, &w.ctx, ev.LumiSlice, d)
	w.ctx.f = nil
	s.pool.Put(w)
}

// ComputeFeatures fills f from ev with the Selector's feature
// configuration, for callers that want to keep the features of an event
// (rate and efficiency reports) and decide with DecideFeatures.
func (s *Selector) ComputeFeatures(ev *Event, f *Features) {
	computeFeatures(ev, &s.cfg, f)
}

// DecideFeatures is Decide for features already computed by
// s.ComputeFeatures for an event of lumi slice l. It panics if f was laid
// out for another feature configuration.
func (s *Selector) DecideFeatures(f *Features, l uint32, d *Decision) {
	if f.scalars == nil || !sameCollections(f.layoutOf, s.cfg.Collections) {
		panic("trigger: DecideFeatures with features not computed by this Selector")
	}
	w := s.pool.Get().(*worker)
	s.decide(f, &w.ctx, l, d)
	w.ctx.f = nil
	s.pool.Put(w)
}

func (s *Selector) decide(f *Features, ctx *evalCtx, l uint32, d *Decision) {
	reg := s.regimeFor(l)
	n := len(s.rules)
	d.Passed = resizeBools(d.Passed, n)
	d.Kept = resizeBools(d.Kept, n)
	d.Streams = d.Streams[:0]
	d.Accept = false
	ctx.f = f
	for i := range s.rules {
		r := &s.rules[i]
		pass := !r.disabled && (r.cond == nil || r.cond(ctx))
		kept := false
		if pass {
			s.passed[i].n.Add(1)
			switch p := reg.prescale[i]; {
			case p == 1:
				kept = true
			case p > 1:
				kept = reg.counters[i].n.Add(1)%uint64(p) == 0
			}
			if kept {
				s.kept[i].n.Add(1)
				d.Accept = true
			}
		}
		d.Passed[i], d.Kept[i] = pass, kept
	}
	for _, st := range s.streams {
		for _, ri := range st.rules {
			if d.Kept[ri] {
				d.Streams = append(d.Streams, st.name)
				break
			}
		}
	}
	d.PrescaleSet = reg.set
	d.MenuHash = s.menu.Hash
	d.LumiSlice = l
}

func resizeBools(b []bool, n int) []bool {
	if cap(b) >= n {
		return b[:n]
	}
	return make([]bool, n)
}

// Counts returns the running counts of every rule, in menu order. It is
// safe for concurrent use; counts of different rules are read one by one,
// not as one snapshot.
func (s *Selector) Counts() []RuleCount {
	st := s.state.Load()
	reg := st.lookup(st.slice)
	out := make([]RuleCount, len(s.rules))
	for i, r := range s.rules {
		out[i] = RuleCount{Name: r.name, Prescale: reg.prescale[i], Passed: s.passed[i].n.Load(), Kept: s.kept[i].n.Load()}
	}
	return out
}

// RuleNames returns the rule names in menu order.
func (s *Selector) RuleNames() []string {
	out := make([]string, len(s.rules))
	for i, r := range s.rules {
		out[i] = r.name
	}
	return out
}
