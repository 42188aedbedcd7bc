package stack

import (
	"sync"
	"time"
)

// ChainSource gives the chain whose rates are wanted; Controller and Stack
// are both one.
type ChainSource interface {
	Chain() *Chain
}

// RuleRate is one rule's counts and rates over the last interval.
type RuleRate struct {
	Name                 string
	Prescale             int
	Passed, Accepted     uint64
	PassedHz, AcceptedHz float64
}

// RateSample is the chain's rates between two calls of Sample.
type RateSample struct {
	At                 time.Time
	LumiSlice          uint32
	CrossingsHz        float64
	BuiltHz            float64
	AcceptedHz         float64
	IncompleteFraction float64
	Rules              []RuleRate
}

// Rates turns a chain's counters into rates by differencing successive
// samples. It is safe for concurrent use; a new chain (a new run) starts
// the differences afresh.
type Rates struct {
	src ChainSource

	mu     sync.Mutex
	chain  *Chain
	at     time.Time
	counts counts
}

type counts struct {
	crossings, built, incomplete, accepted uint64
	passed, kept                           map[string]uint64
}

// NewRates returns a rate sampler over src.
func NewRates(src ChainSource) *Rates { return &Rates{src: src} }

func (c *Chain) counts() counts {
	b := c.asm.Stats()
	out := counts{
		crossings: c.emu.Offered(), built: b.EventsComplete + b.EventsIncomplete, incomplete: b.EventsIncomplete,
		accepted: c.sel.Accepted(), passed: map[string]uint64{}, kept: map[string]uint64{},
	}
	for _, rc := range c.sel.Counts() {
		out.passed[rc.Name], out.kept[rc.Name] = rc.Passed, rc.Kept
	}
	return out
}

// Sample returns the rates since the previous call (the first call after a
// new chain returns the counts with zero rates).
func (r *Rates) Sample() RateSample {
	now := time.Now()
	chain := r.src.Chain()
	r.mu.Lock()
	defer r.mu.Unlock()
	out := RateSample{At: now}
	if chain == nil {
		return out
	}
	cur := chain.counts()
	out.LumiSlice = chain.sel.LumiSlice()
	fresh := chain != r.chain
	dt := now.Sub(r.at).Seconds()
	rate := func(now, before uint64) float64 {
		if fresh || dt <= 0 || now < before {
			return 0
		}
		return float64(now-before) / dt
	}
	prev := r.counts
	out.CrossingsHz = rate(cur.crossings, prev.crossings)
	out.BuiltHz = rate(cur.built, prev.built)
	out.AcceptedHz = rate(cur.accepted, prev.accepted)
	if !fresh && cur.built > prev.built {
		out.IncompleteFraction = float64(cur.incomplete-prev.incomplete) / float64(cur.built-prev.built)
	}
	for _, rc := range chain.sel.Counts() {
		rr := RuleRate{Name: rc.Name, Prescale: rc.Prescale, Passed: rc.Passed, Accepted: rc.Kept}
		// A rule that was not in the last sample (a menu just swapped in)
		// has no rate yet.
		if before, ok := prev.passed[rc.Name]; ok {
			rr.PassedHz, rr.AcceptedHz = rate(rc.Passed, before), rate(rc.Kept, prev.kept[rc.Name])
		}
		out.Rules = append(out.Rules, rr)
	}
	r.chain, r.at, r.counts = chain, now, cur
	return out
}
