package report

import (
	"compress/flate"
	"fmt"
	"math"
	"strings"
	"sync/atomic"

	"go-hep.org/x/hep/groot/rhist"
	"go-hep.org/x/hep/groot/riofs"
	"go-hep.org/x/hep/groot/root"
	"go-hep.org/x/hep/groot/rtree"
	"go-hep.org/x/hep/hbook"

	"github.com/bunchsieve/bunchsieve/services/report/replay"
)

// TreeName is the name of the per-event tree in report.root.
const TreeName = "events"

// treeWriter writes report.root: the per-event tree as the events go by,
// then the histograms at the end. The events are copied in batches to a
// goroutine of its own that writes the tree, so that filling groot's
// branches and compressing their baskets (2 µs per event with the
// starter menu's 35 branches) stays off the replay's deciding goroutine
// and runs where a processor has time. Its methods are used by one
// goroutine.
type treeWriter struct {
	path  string
	f     *riofs.File
	w     rtree.Writer
	nVals int
	nBits int // pass bits then keep bits, per rule
	truth bool

	// The branches' variables, set by the writing goroutine.
	run, bcid, lumi, flags uint32
	orbit                  uint64
	weight                 float64
	values                 []float64
	accept                 bool
	bits                   []bool
	trueMET                float64
	process, interactions  int32

	cur     *treeBatch // being filled
	full    chan *treeBatch
	free    chan *treeBatch
	done    chan struct{} // closed when the writing goroutine ends
	failed  atomic.Bool   // the writing goroutine has an error
	err     error         // its error, read once done is closed or failed set
	stopped bool          // full is closed
}

// treeBatchEvents is the number of events copied to the writing goroutine
// at once; treeBatches the number of batches in flight.
const (
	treeBatchEvents = 256
	treeBatches     = 8
)

// treeEntry is an event's fixed-size branches.
type treeEntry struct {
	run, bcid, lumi, flags uint32
	orbit                  uint64
	weight, trueMET        float64
	process, interactions  int32
	accept                 bool
}

// treeBatch holds the entries of up to treeBatchEvents events, their
// values and bits side by side.
type treeBatch struct {
	n      int
	fixed  []treeEntry
	values []float64
	bits   []bool
}

// branchName turns a rule or quantity name into a branch name of
// letters, digits and underscores: count(jets) is n_jets, jets[0].et is
// jets0_et.
func branchName(s string) string {
	if strings.HasPrefix(s, "count(") && strings.HasSuffix(s, ")") {
		s = "n_" + s[len("count("):len(s)-1]
	}
	s = strings.NewReplacer("[", "", "]", "", ".", "_").Replace(s)
	var b strings.Builder
	for _, c := range s {
		if c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '_' {
			b.WriteRune(c)
		} else {
			b.WriteByte('_')
		}
	}
	return b.String()
}

func newTreeWriter(path string, a *accumulator, values []replay.Quantity) (*treeWriter, error) {
	// Compressed with zlib at its fastest: groot's LZ4 path leaves too
	// little room for a basket that compresses only a little and then
	// fails to write it (TestTreeOfHardToCompressValues); zlib at level 1
	// costs about the same time and gives a file about a tenth smaller
	// (docs/report-format.md).
	f, err := riofs.Create(path, riofs.WithZlib(flate.BestSpeed))
	if err != nil {
		return nil, fmt.Errorf("report: %w", err)
	}
	t := &treeWriter{path: path, f: f, truth: a.sample.Truth}
	t.nVals = len(treeQuantities(a.menu))
	t.nBits = 2 * a.nRules
	t.values = make([]float64, t.nVals)
	t.bits = make([]bool, t.nBits)
	used := map[string]bool{}
	unique := func(name string) string {
		n := name
		for k := 2; used[n]; k++ {
			n = fmt.Sprintf("%s_%d", name, k)
		}
		used[n] = true
		return n
	}
	vars := []rtree.WriteVar{
		{Name: unique("run"), Value: &t.run}, {Name: unique("orbit"), Value: &t.orbit}, {Name: unique("bcid"), Value: &t.bcid},
		{Name: unique("lumi"), Value: &t.lumi}, {Name: unique("flags"), Value: &t.flags}, {Name: unique("weight"), Value: &t.weight},
		{Name: unique("accept"), Value: &t.accept},
	}
	for i := range t.nVals {
		vars = append(vars, rtree.WriteVar{Name: unique(branchName(values[i].String())), Value: &t.values[i]})
	}
	for i, r := range a.menu.Rules {
		vars = append(vars, rtree.WriteVar{Name: unique("pass_" + branchName(r.Name)), Value: &t.bits[i]})
	}
	for i, r := range a.menu.Rules {
		vars = append(vars, rtree.WriteVar{Name: unique("keep_" + branchName(r.Name)), Value: &t.bits[a.nRules+i]})
	}
	if t.truth {
		vars = append(vars, rtree.WriteVar{Name: unique("true_met"), Value: &t.trueMET},
			rtree.WriteVar{Name: unique("process"), Value: &t.process}, rtree.WriteVar{Name: unique("interactions"), Value: &t.interactions})
	}
	// Baskets of 128 KiB: each basket costs a compressor set-up, which at
	// the default size cost more than the compression itself; but every
	// branch fills its baskets at the same pace, so they are compressed
	// all at once, and at 1 MiB that stalled the replay's deciding
	// goroutine long enough for the lanes to run out of room.
	t.w, err = rtree.NewWriter(f, TreeName, vars, rtree.WithTitle("one entry per event: ids, features, per-rule pass (before prescale) and keep (after prescale) bits"), rtree.WithZlib(flate.BestSpeed), rtree.WithBasketSize(128<<10))
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("report: %w", err)
	}
	t.full, t.free, t.done = make(chan *treeBatch, treeBatches), make(chan *treeBatch, treeBatches), make(chan struct{})
	for range treeBatches {
		t.free <- &treeBatch{fixed: make([]treeEntry, treeBatchEvents), values: make([]float64, treeBatchEvents*t.nVals), bits: make([]bool, treeBatchEvents*t.nBits)}
	}
	go t.writeBatches()
	return t, nil
}

// fill copies one event for the tree. Values missing in the event (no
// leading jet) are written as 0; the n_ branches say how many objects
// there were. It returns the writing goroutine's error once it has one.
func (t *treeWriter) fill(e *replay.Event, passed, kept []bool, accept bool, w float64) error {
	if t.failed.Load() {
		return t.stop()
	}
	b := t.cur
	if b == nil {
		b = <-t.free
		b.n, t.cur = 0, b
	}
	i := b.n
	en := &b.fixed[i]
	*en = treeEntry{run: e.Run, orbit: e.Orbit, bcid: e.Bcid, lumi: e.LumiSlice, flags: e.Flags, weight: w, accept: accept}
	vals := b.values[i*t.nVals : (i+1)*t.nVals]
	for k := range vals {
		v := e.Values[k]
		if math.IsNaN(v) {
			v = 0
		}
		vals[k] = v
	}
	bits := b.bits[i*t.nBits : (i+1)*t.nBits]
	copy(bits, passed)
	copy(bits[len(passed):], kept)
	if t.truth {
		en.process = -1
		if tr := e.Truth; tr != nil {
			en.trueMET, en.process, en.interactions = math.Hypot(tr.TrueMETx, tr.TrueMETy), int32(tr.Truth.Process), int32(tr.Interactions)
		}
	}
	if b.n++; b.n == treeBatchEvents {
		t.full <- b
		t.cur = nil
	}
	return nil
}

// writeBatches is the writing goroutine: it writes the events of every
// batch in order, and after an error only takes the batches back.
func (t *treeWriter) writeBatches() {
	defer close(t.done)
	for b := range t.full {
		for i := 0; i < b.n && t.err == nil; i++ {
			en := &b.fixed[i]
			t.run, t.orbit, t.bcid, t.lumi, t.flags, t.weight, t.accept = en.run, en.orbit, en.bcid, en.lumi, en.flags, en.weight, en.accept
			t.trueMET, t.process, t.interactions = en.trueMET, en.process, en.interactions
			copy(t.values, b.values[i*t.nVals:(i+1)*t.nVals])
			copy(t.bits, b.bits[i*t.nBits:(i+1)*t.nBits])
			if _, err := t.w.Write(); err != nil {
				t.err = fmt.Errorf("report: %s: %w", t.path, err)
				t.failed.Store(true)
			}
		}
		t.free <- b
	}
}

// stop hands over the last batch, waits for the writing goroutine and
// returns its error. It may be called more than once.
func (t *treeWriter) stop() error {
	if !t.stopped {
		if t.cur != nil && t.cur.n > 0 {
			t.full <- t.cur
		}
		t.cur = nil
		close(t.full)
		t.stopped = true
	}
	<-t.done
	return t.err
}

func (t *treeWriter) abort() {
	_ = t.stop()
	_ = t.w.Close()
	_ = t.f.Close()
}

// finish writes the last events, closes the tree and writes the
// histograms of rep.
func (t *treeWriter) finish(rep *Report) error {
	if err := t.stop(); err != nil {
		t.w.Close()
		t.f.Close()
		return err
	}
	if err := t.w.Close(); err != nil {
		t.f.Close()
		return fmt.Errorf("report: %s: %w", t.path, err)
	}
	put := func(name string, v root.Object) error {
		if err := t.f.Put(name, v); err != nil {
			return fmt.Errorf("report: %s: %w", t.path, err)
		}
		return nil
	}
	for k, sc := range rep.Scans {
		if err := put(ScanHistName(k, sc), rhist.NewH1DFrom(scanHist(k, sc))); err != nil {
			t.f.Close()
			return err
		}
	}
	for k := range rep.Efficiencies {
		ef := &rep.Efficiencies[k]
		total, pass, eff := turnOnObjects(k, ef)
		for _, o := range []struct {
			name string
			v    root.Object
		}{{total.Name(), rhist.NewH1DFrom(total)}, {pass.Name(), rhist.NewH1DFrom(pass)}, {eff.Name(), rhist.NewGraphAsymmErrorsFrom(eff)}} {
			if err := put(o.name, o.v); err != nil {
				t.f.Close()
				return err
			}
		}
	}
	if n := len(rep.Overlap.Rules); n > 0 {
		h := hbook.NewH2D(n, 0, float64(n), n, 0, float64(n))
		h.Annotation()["name"] = "overlap_passed"
		h.Annotation()["title"] = "rate [Hz] of events passing both rules (before prescale); bins follow the rule order of the menu"
		for i := range n {
			for j := range n {
				h.Fill(float64(i)+0.5, float64(j)+0.5, rep.Overlap.PassedRateHz[i][j])
			}
		}
		if err := put("overlap_passed", rhist.NewH2DFrom(h)); err != nil {
			t.f.Close()
			return err
		}
	}
	if err := t.f.Close(); err != nil {
		return fmt.Errorf("report: %s: %w", t.path, err)
	}
	return nil
}

// ScanHistName is the name of scan k's histogram in report.root.
func ScanHistName(k int, sc Scan) string {
	return fmt.Sprintf("scan_%d_%s", k, branchName(sc.Rule))
}

// TurnOnHistNames are the names of turn-on k's objects in report.root:
// the histograms of all events and of passing events per bin, and the
// efficiency graph with Clopper-Pearson errors.
func TurnOnHistNames(k int, ef *Efficiency) (total, pass, graph string) {
	base := fmt.Sprintf("turnon_%d_%s_%s", k, branchName(ef.Rule), branchName(ef.Reference))
	return base + "_total", base + "_pass", base + "_eff"
}

// setBin sets a bin's distribution to n entries of summed weight sumw and
// squared weight sumw2 at x, and adds it to the histogram's total.
func setBin(h *hbook.H1D, d *hbook.Dist1D, n int64, sumw, sumw2, x float64) {
	d.Dist = hbook.Dist0D{N: n, SumW: sumw, SumW2: sumw2}
	d.Stats.SumWX, d.Stats.SumWX2 = sumw*x, sumw*x*x
	t := &h.Binning.Dist
	t.Dist.N += n
	t.Dist.SumW += sumw
	t.Dist.SumW2 += sumw2
	t.Stats.SumWX += sumw * x
	t.Stats.SumWX2 += sumw * x * x
}

// scanHist is the rate versus threshold: one bin per scan point, centred
// on it, holding the rate before prescale in Hz with its error; the
// bin's entries are the passing events.
func scanHist(k int, sc Scan) *hbook.H1D {
	n := len(sc.Points)
	step := 1.0
	if n > 1 {
		step = sc.Points[1].ThresholdGeV - sc.Points[0].ThresholdGeV
	}
	lo := sc.Points[0].ThresholdGeV - step/2
	h := hbook.NewH1D(n, lo, lo+float64(n)*step)
	h.Annotation()["name"] = ScanHistName(k, sc)
	h.Annotation()["title"] = fmt.Sprintf("%s: rate before prescale [Hz] vs threshold of %s [GeV]", sc.Rule, sc.Threshold)
	for i, p := range sc.Points {
		r := p.Before
		setBin(h, &h.Binning.Bins[i].Dist, int64(r.Events), r.RateHz, r.ErrorHz*r.ErrorHz, p.ThresholdGeV)
	}
	return h
}

// turnOnObjects builds turn-on k's histograms and graph.
func turnOnObjects(k int, ef *Efficiency) (total, pass *hbook.H1D, eff *hbook.S2D) {
	nTotal, nPass, nGraph := TurnOnHistNames(k, ef)
	edges := make([]float64, 0, len(ef.Bins)+1)
	for _, b := range ef.Bins {
		edges = append(edges, b.Lo)
	}
	edges = append(edges, ef.Bins[len(ef.Bins)-1].Hi)
	total, pass = hbook.NewH1DFromEdges(edges), hbook.NewH1DFromEdges(edges)
	unit := ""
	if ef.Unit != "" {
		unit = " [" + ef.Unit + "]"
	}
	total.Annotation()["name"], pass.Annotation()["name"] = nTotal, nPass
	total.Annotation()["title"] = fmt.Sprintf("events vs %s%s", ef.Reference, unit)
	pass.Annotation()["title"] = fmt.Sprintf("events passing %s vs %s%s", ef.Rule, ef.Reference, unit)
	var pts []hbook.Point2D
	for i, b := range ef.Bins {
		x := (b.Lo + b.Hi) / 2
		setBin(total, &total.Binning.Bins[i].Dist, int64(b.Total), float64(b.Total), float64(b.Total), x)
		setBin(pass, &pass.Binning.Bins[i].Dist, int64(b.Pass), float64(b.Pass), float64(b.Pass), x)
		if b.Efficiency != nil {
			e := *b.Efficiency
			pts = append(pts, hbook.Point2D{X: x, Y: e, ErrX: hbook.Range{Min: x - b.Lo, Max: b.Hi - x}, ErrY: hbook.Range{Min: e - *b.Lower, Max: *b.Upper - e}})
		}
	}
	for _, o := range []struct {
		h    *hbook.H1D
		c    EffCount
		pass bool
	}{{total, ef.Underflow, false}, {pass, ef.Underflow, true}} {
		n := o.c.Total
		if o.pass {
			n = o.c.Pass
		}
		setBin(o.h, &o.h.Binning.Outflows[0], int64(n), float64(n), float64(n), ef.Bins[0].Lo)
	}
	for _, o := range []struct {
		h    *hbook.H1D
		pass bool
	}{{total, false}, {pass, true}} {
		n := ef.Overflow.Total
		if o.pass {
			n = ef.Overflow.Pass
		}
		setBin(o.h, &o.h.Binning.Outflows[1], int64(n), float64(n), float64(n), ef.Bins[len(ef.Bins)-1].Hi)
	}
	eff = hbook.NewS2D(pts...)
	eff.Annotation()["name"] = nGraph
	eff.Annotation()["title"] = fmt.Sprintf("efficiency of %s vs %s%s (Clopper-Pearson intervals)", ef.Rule, ef.Reference, unit)
	return total, pass, eff
}
