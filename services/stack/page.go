package stack

import (
	"sync"
	"time"

	"github.com/bunchsieve/bunchsieve/services/web"
)

// page adapts a running chain to the operator page. Snapshots are cached
// for a moment, so that several open pages do not shorten each other's
// rate intervals.
type page struct {
	src   ChainSource
	rates *Rates
	head  func() (web.Snapshot, bool) // phase, run, menu...; false: no run

	mu   sync.Mutex
	at   time.Time
	last web.Snapshot
}

const pageRefresh = 900 * time.Millisecond

func (p *page) Snapshot() web.Snapshot {
	p.mu.Lock()
	defer p.mu.Unlock()
	if time.Since(p.at) < pageRefresh {
		return p.last
	}
	snap, running := p.head()
	if chain := p.src.Chain(); chain != nil && running {
		r := p.rates.Sample()
		snap.LumiSlice = r.LumiSlice
		snap.CrossingsHz, snap.BuiltHz, snap.AcceptedHz = r.CrossingsHz, r.BuiltHz, r.AcceptedHz
		snap.IncompleteFraction = r.IncompleteFraction
		for _, rr := range r.Rules {
			snap.Rules = append(snap.Rules, web.RuleStatus{Name: rr.Name, Prescale: rr.Prescale, PassedHz: rr.PassedHz,
				AcceptedHz: rr.AcceptedHz, Passed: rr.Passed, Accepted: rr.Accepted})
		}
		lat := &chain.asm.Latency
		snap.BuildLatencyP50S, snap.BuildLatencyP90S, snap.BuildLatencyP99S = lat.Quantile(0.5).Seconds(), lat.Quantile(0.9).Seconds(), lat.Quantile(0.99).Seconds()
		snap.EndToEndP99S = chain.sel.EndToEnd.Quantile(0.99).Seconds()
		for _, ss := range chain.asm.SourceStates() {
			snap.Sources = append(snap.Sources, web.SourceHealth{ID: ss.ID, Alive: ss.Alive, Received: ss.Received, Discarded: ss.Discarded()})
		}
	}
	p.at, p.last = time.Now(), snap
	return snap
}

// Page returns the operator page's data source for a controlled host.
func (c *Controller) Page() web.Source {
	return &page{src: c, rates: NewRates(c), head: func() (web.Snapshot, bool) {
		st := c.Status()
		return web.Snapshot{
			Phase: st.Phase.String(), Detail: st.Detail, Run: st.Run, LumiSlice: st.LumiSlice,
			PrescaleSet: st.PrescaleSet, Menu: st.MenuName, MenuHash: st.MenuHash, UptimeS: st.Uptime.Seconds(),
		}, st.Phase == Flowing || st.Phase == Draining
	}}
}

// Page returns the operator page's data source for a one-run stack.
func (s *Stack) Page() web.Source {
	started := time.Now()
	return &page{src: s, rates: NewRates(s), head: func() (web.Snapshot, bool) {
		c := s.chain
		t := c.sel.Trigger()
		return web.Snapshot{
			Phase: c.state().phase, Run: c.opts.Run.Run, PrescaleSet: t.PrescaleStatus().Set, Menu: t.Menu().Name,
			MenuHash: t.Menu().Hash, UptimeS: time.Since(started).Seconds(),
		}, true
	}}
}
