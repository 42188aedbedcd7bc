package report

import (
	"fmt"
	"math"
	"slices"

	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/services/report/stats"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// accumulator is the replay's sink: it counts what the report needs as
// the events go by. It is used by one goroutine.
type accumulator struct {
	opts   Options
	sample replay.Sample
	menu   *trigger.Menu // the report's menu, as given
	run    *trigger.Menu // the menu decided: Menu, or Menu with scan rules
	nRules int           // rules of the report's menu: the first of run's
	set    string        // the prescale set applied: Options.PrescaleSet or the active set
	pres   []int         // its prescales
	etaMax float64

	all                  stats.Count // every event
	weighted             bool
	passed, kept, unique []stats.Count
	first                []stats.Count // events whose first kept rule is i
	total                stats.Count
	ovPassed, ovKept     [][]stats.Count
	passedIdx, keptIdx   []int

	scans []scanAcc
	effs  []effAcc
	cmp   *cmpAcc

	tree *treeWriter
}

type scanAcc struct {
	spec     ScanSpec
	th       threshold
	rule     int
	points   []float64
	conds    []string
	idx      []int // rule index in run of each point
	prescale int
	passed   []stats.Count
	kept     []stats.Count
}

type effAcc struct {
	spec      EfficiencySpec
	rule      int
	ref       reference
	edges     []float64
	total     []uint64
	pass      []uint64
	under     EffCount
	over      EffCount
	undefined uint64
}

// cmpAcc compares the other menu (menu index 1 of the replay).
type cmpAcc struct {
	menu     *trigger.Menu
	set      string
	pres     []int
	passed   []stats.Count
	kept     []stats.Count
	total    stats.Count
	pairs    [][2]int // (rule in report menu, rule in other menu)
	onlyMain []int
	onlyOth  []int
	// For each pair, the events where exactly one menu's rule passed
	// (before) or kept (after), by which one: the difference's error.
	diffBeforeA, diffBeforeB []stats.Count
	diffAfterA, diffAfterB   []stats.Count
	diffTotalA, diffTotalB   stats.Count
}

func newAccumulator(opts Options, sample replay.Sample) (*accumulator, replay.Config, error) {
	m := opts.Menu
	a := &accumulator{opts: opts, sample: sample, menu: m, run: m, nRules: len(m.Rules), etaMax: sample.Description.Geometry.EtaMax}
	var cfg replay.Config
	set := opts.PrescaleSet
	if set == "" {
		set = m.ActiveSet
	}
	pres, err := m.Prescales(set)
	if err != nil {
		return nil, cfg, fmt.Errorf("report: menu %s: %w", m.Name, err)
	}
	a.set, a.pres = set, pres

	// Scans: one extra rule per point, compiled into a copy of the menu.
	var extra []extraRule
	taken := map[string]bool{}
	for _, r := range m.Rules {
		taken[r.Name] = true
	}
	for si, sp := range opts.Scans {
		ri := m.RuleIndex(sp.Rule)
		if ri < 0 {
			return nil, cfg, fmt.Errorf("%w: scan of unknown rule %q (the menu has %s)", ErrBadSpec, sp.Rule, ruleNames(m))
		}
		rule := &m.Rules[ri]
		if rule.Disabled {
			return nil, cfg, fmt.Errorf("%w: rule %s is disabled: nothing to scan", ErrBadSpec, sp.Rule)
		}
		th, _, err := findThreshold(rule, sp.Param)
		if err != nil {
			return nil, cfg, err
		}
		sc := scanAcc{spec: sp, th: th, rule: ri, points: sp.Values.Values(), prescale: pres[ri]}
		for pi, v := range sc.points {
			name := fmt.Sprintf("scan.%d.%d", si, pi)
			for taken[name] {
				name = "x" + name
			}
			taken[name] = true
			cond := substitute(rule.When, th, v)
			extra = append(extra, extraRule{name: name, when: cond})
			sc.conds = append(sc.conds, cond)
			sc.idx = append(sc.idx, len(m.Rules)+len(extra)-1)
		}
		sc.passed = make([]stats.Count, len(sc.points))
		sc.kept = make([]stats.Count, len(sc.points))
		a.scans = append(a.scans, sc)
	}
	if len(extra) > 0 {
		if len(opts.MenuSource) == 0 {
			return nil, cfg, fmt.Errorf("%w: scans need the menu's source text", ErrBadSpec)
		}
		run, err := augmentMenu(m.File, opts.MenuSource, extra)
		if err != nil {
			return nil, cfg, err
		}
		// The source must be the menu's own: same rules, same meaning.
		for i := range m.Rules {
			if run.Rules[i].Name != m.Rules[i].Name || run.Rules[i].When != m.Rules[i].When {
				return nil, cfg, fmt.Errorf("report: the menu source does not match menu %s", m.Name)
			}
		}
		a.run = run
	}
	runPres := slices.Clone(pres)
	for _, sc := range a.scans {
		for range sc.idx {
			runPres = append(runPres, sc.prescale)
		}
	}

	// Values: the tree's features, then the efficiencies' feature
	// references.
	cfg.Values = treeQuantities(m)
	for _, es := range opts.Efficiencies {
		ri := m.RuleIndex(es.Rule)
		if ri < 0 {
			return nil, cfg, fmt.Errorf("%w: efficiency of unknown rule %q (the menu has %s)", ErrBadSpec, es.Rule, ruleNames(m))
		}
		ref, err := resolveReference(es.Reference, m, sample.Truth, &cfg.Values)
		if err != nil {
			return nil, cfg, err
		}
		if es.Bins == (Range{}) {
			es.Bins = defaultBins(&m.Rules[ri], ref)
		}
		edges := es.Bins.Values()
		if len(edges) < 2 {
			return nil, cfg, fmt.Errorf("%w: efficiency %s:%s needs at least one bin", ErrBadSpec, es.Rule, es.Reference)
		}
		n := len(edges) - 1
		a.effs = append(a.effs, effAcc{spec: es, rule: ri, ref: ref, edges: edges, total: make([]uint64, n), pass: make([]uint64, n)})
	}

	// The prescales are given explicitly (the scan rules need theirs);
	// the set names go along so that the replay's summary tells the same.
	cfg.Menus = []*trigger.Menu{a.run}
	cfg.Prescales = [][]int{runPres}
	cfg.PrescaleSets = []string{set}
	if c := opts.Compare; c != nil {
		cset := opts.ComparePrescaleSet
		if cset == "" {
			cset = c.ActiveSet
		}
		cp, err := c.Prescales(cset)
		if err != nil {
			return nil, cfg, fmt.Errorf("report: menu to compare %s: %w", c.Name, err)
		}
		ca := &cmpAcc{menu: c, set: cset, pres: cp, passed: make([]stats.Count, len(c.Rules)), kept: make([]stats.Count, len(c.Rules))}
		for i, r := range m.Rules {
			if j := c.RuleIndex(r.Name); j >= 0 {
				ca.pairs = append(ca.pairs, [2]int{i, j})
			} else {
				ca.onlyMain = append(ca.onlyMain, i)
			}
		}
		for j, r := range c.Rules {
			if m.RuleIndex(r.Name) < 0 {
				ca.onlyOth = append(ca.onlyOth, j)
			}
		}
		n := len(ca.pairs)
		ca.diffBeforeA, ca.diffBeforeB = make([]stats.Count, n), make([]stats.Count, n)
		ca.diffAfterA, ca.diffAfterB = make([]stats.Count, n), make([]stats.Count, n)
		a.cmp = ca
		cfg.Menus = append(cfg.Menus, c)
		cfg.Prescales = append(cfg.Prescales, cp)
		cfg.PrescaleSets = append(cfg.PrescaleSets, cset)
	}

	r := a.nRules
	a.passed, a.kept, a.unique, a.first = make([]stats.Count, r), make([]stats.Count, r), make([]stats.Count, r), make([]stats.Count, r)
	a.ovPassed, a.ovKept = make([][]stats.Count, r), make([][]stats.Count, r)
	for i := range r {
		a.ovPassed[i], a.ovKept[i] = make([]stats.Count, r), make([]stats.Count, r)
	}
	return a, cfg, nil
}

func ruleNames(m *trigger.Menu) string {
	var names []string
	for _, r := range m.Rules {
		names = append(names, r.Name)
	}
	return fmt.Sprintf("%v", names)
}

// defaultBins gives a turn-on binning when none was asked for: 40 bins
// from 0 to twice the rule's first energy threshold for an energy
// reference, 0 to 20 in steps of 1 for a count, else 0 to 500 GeV.
func defaultBins(rule *trigger.RuleSpec, ref reference) Range {
	if ref.unit == "" {
		return Range{From: 0, To: 20, Step: 1}
	}
	if !rule.PassThrough() {
		if ths := thresholds(rule.When); len(ths) > 0 && ths[0].gev > 0 {
			return Range{From: 0, To: 2 * ths[0].gev, Step: ths[0].gev / 20}
		}
	}
	return Range{From: 0, To: 500, Step: 10}
}

// add is the replay sink.
func (a *accumulator) add(e *replay.Event) error {
	w := e.Weight()
	if w != 1 {
		a.weighted = true
	}
	a.all.Add(w)
	passed, kept := e.Passed[0], e.Kept[0]
	a.passedIdx, a.keptIdx = a.passedIdx[:0], a.keptIdx[:0]
	for i := range a.nRules {
		if passed[i] {
			a.passed[i].Add(w)
			a.passedIdx = append(a.passedIdx, i)
		}
		if kept[i] {
			a.kept[i].Add(w)
			a.keptIdx = append(a.keptIdx, i)
		}
	}
	accept := len(a.keptIdx) > 0
	if accept {
		a.total.Add(w)
		a.first[a.keptIdx[0]].Add(w)
		if len(a.keptIdx) == 1 {
			a.unique[a.keptIdx[0]].Add(w)
		}
	}
	for _, i := range a.passedIdx {
		for _, j := range a.passedIdx {
			a.ovPassed[i][j].Add(w)
		}
	}
	for _, i := range a.keptIdx {
		for _, j := range a.keptIdx {
			a.ovKept[i][j].Add(w)
		}
	}
	for s := range a.scans {
		sc := &a.scans[s]
		for p, ri := range sc.idx {
			if passed[ri] {
				sc.passed[p].Add(w)
			}
			if kept[ri] {
				sc.kept[p].Add(w)
			}
		}
	}
	for k := range a.effs {
		ef := &a.effs[k]
		x, ok := ef.ref.eval(e, a.etaMax)
		if !ok {
			ef.undefined++
			continue
		}
		pass := passed[ef.rule]
		var c *EffCount
		switch {
		case x < ef.edges[0]:
			c = &ef.under
		case x >= ef.edges[len(ef.edges)-1]:
			c = &ef.over
		default:
			b := binOf(ef.edges, x)
			ef.total[b]++
			if pass {
				ef.pass[b]++
			}
			continue
		}
		c.Total++
		if pass {
			c.Pass++
		}
	}
	if c := a.cmp; c != nil {
		op, ok := e.Passed[1], e.Kept[1]
		for j := range c.menu.Rules {
			if op[j] {
				c.passed[j].Add(w)
			}
			if ok[j] {
				c.kept[j].Add(w)
			}
		}
		if e.Accept[1] {
			c.total.Add(w)
		}
		for k, pr := range c.pairs {
			i, j := pr[0], pr[1]
			switch {
			case passed[i] && !op[j]:
				c.diffBeforeA[k].Add(w)
			case !passed[i] && op[j]:
				c.diffBeforeB[k].Add(w)
			}
			switch {
			case kept[i] && !ok[j]:
				c.diffAfterA[k].Add(w)
			case !kept[i] && ok[j]:
				c.diffAfterB[k].Add(w)
			}
		}
		switch {
		case accept && !e.Accept[1]:
			c.diffTotalA.Add(w)
		case !accept && e.Accept[1]:
			c.diffTotalB.Add(w)
		}
	}
	if a.tree != nil {
		return a.tree.fill(e, passed[:a.nRules], kept[:a.nRules], accept, w)
	}
	return nil
}

// binOf returns the bin of x among edges, which are equally spaced and
// hold x; rounding at an edge is settled by comparing with the edges.
func binOf(edges []float64, x float64) int {
	n := len(edges) - 1
	b := int((x - edges[0]) / (edges[n] - edges[0]) * float64(n))
	b = min(max(b, 0), n-1)
	for b > 0 && x < edges[b] {
		b--
	}
	for b < n-1 && x >= edges[b+1] {
		b++
	}
	return b
}

// treeQuantities lists the features the per-event tree keeps: met,
// met_phi, sumet, every algorithm scalar, and for every collection its
// size and the fields of its leading object.
func treeQuantities(m *trigger.Menu) []replay.Quantity {
	var qs []replay.Quantity
	add := func(s string) {
		if q, err := replay.ParseQuantity(s); err == nil && q.Check(m) == nil {
			qs = append(qs, q)
		}
	}
	for _, s := range []string{"met", "met_phi", "sumet"} {
		add(s)
	}
	for _, cc := range m.Features.Collections {
		for _, sc := range cc.Algorithm.Schema().Scalars {
			add(sc.Name)
		}
	}
	for _, cc := range m.Features.Collections {
		add("count(" + cc.Name + ")")
		for _, f := range cc.Algorithm.Schema().Fields {
			add(cc.Name + "[0]." + f.Name)
		}
	}
	return qs
}

// rate turns a count into a Rate.
func (a *accumulator) rate(c stats.Count) Rate {
	r, e := c.Rate(a.all.N, crossingRate(a.sample.Description))
	return Rate{Events: c.N, SumW: c.SumW, SumW2: c.SumW2, RateHz: r, ErrorHz: e}
}

// difference returns the rate of other - menu and its error, from the
// events where only the menu (ca) or only the other (cb) fired: per event
// the difference is -w, +w or 0, and its mean's standard error follows as
// for any count (stats.Count.Fraction).
func (a *accumulator) difference(ca, cb stats.Count) (float64, float64) {
	n := float64(a.all.N)
	if n == 0 {
		return 0, 0
	}
	rate := crossingRate(a.sample.Description)
	d := cb.SumW - ca.SumW
	v := (ca.SumW2 + cb.SumW2 - d*d/n) / (n * n)
	return d / n * rate, math.Sqrt(math.Max(v, 0)) * rate
}
