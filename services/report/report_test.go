package report

import (
	"bytes"
	"context"
	"errors"
	"image"
	_ "image/png"
	"math"
	"os"
	"path/filepath"
	"testing"

	"go-hep.org/x/hep/groot/rhist"
	"go-hep.org/x/hep/groot/riofs"
	"go-hep.org/x/hep/groot/rtree"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
)

const prescaleMenu = `menu: prescale-check
version: 1
features:
  towers: {noise_cut: 0.5 GeV}
  jets: {finder: window, seed: 5 GeV, min_et: 20 GeV}
rules:
  soft-met:  {when: "met > 15 GeV", prescale: 7}
  sumet-low: {when: "sumet > 120 GeV", prescale: 3}
  jet-40:    {when: "jets[0].et > 40 GeV"}
  sample:    {keep_fraction: 0.01}
`

// For a rule of prescale P, the rate after prescale is the rate before
// divided by P within one event's worth of rate: the counter keeps
// exactly floor(passes / P). The rates follow DESIGN.md 7: passes /
// crossings x colliding-crossing rate, with the binomial error
// sqrt(k (N - k) / N) / N of a fraction (textbook binomial standard
// error), and the Meridian crossing rate is 2400 colliding bunches x
// 11245.5 Hz (revolution frequency c / 26658.883 m, LHC Design Report
// vol. I, CERN-2004-003, memory; our filling scheme has 2400 bunches).
func TestPrescaledRateIsRateOverP(t *testing.T) {
	m := parseMenu(t, prescaleMenu)
	rep := run(t, toySource(t, 2, 3000), Options{Menu: m})
	const crossingRate = 2400 * 11245.5
	if math.Abs(rep.Sample.CrossingRateHz-crossingRate) > 1e-6 {
		t.Fatalf("crossing rate %v, want %v", rep.Sample.CrossingRateHz, crossingRate)
	}
	n := float64(rep.Processing.Crossings)
	if n != 3000 {
		t.Fatalf("%v crossings", n)
	}
	oneEvent := crossingRate / n
	for _, r := range rep.Rules {
		k := float64(r.Before.Events)
		if r.Before.Events < 50 {
			t.Fatalf("rule %s passed only %v events: too few to check", r.Name, k)
		}
		if want := k / n * crossingRate; math.Abs(r.Before.RateHz-want) > 1e-9*want {
			t.Errorf("%s: rate %v, want k/N x rate = %v", r.Name, r.Before.RateHz, want)
		}
		if want := math.Sqrt(k*(n-k)/n) / n * crossingRate; math.Abs(r.Before.ErrorHz-want) > 1e-9*want {
			t.Errorf("%s: error %v, want binomial %v", r.Name, r.Before.ErrorHz, want)
		}
		p := float64(r.Prescale)
		if r.After.Events != r.Before.Events/uint64(r.Prescale) {
			t.Errorf("%s: kept %d of %d at prescale %d, want floor(passes/P)", r.Name, r.After.Events, r.Before.Events, r.Prescale)
		}
		if d := math.Abs(r.After.RateHz - r.Before.RateHz/p); d >= oneEvent {
			t.Errorf("%s: after %v, before/P %v: differ by %v, more than one event's worth %v", r.Name, r.After.RateHz, r.Before.RateHz/p, d, oneEvent)
		}
	}
	if rep.Rules[3].Prescale != 100 {
		t.Errorf("keep_fraction 0.01 gives prescale %d", rep.Rules[3].Prescale)
	}
	// The cumulative rate ends at the total; unique rates fit inside it.
	last := rep.Rules[len(rep.Rules)-1].Cumulative
	if last.Events != rep.Total.Events || last.RateHz != rep.Total.RateHz {
		t.Errorf("cumulative %+v, total %+v", last, rep.Total)
	}
	var unique uint64
	for i, r := range rep.Rules {
		unique += r.Unique.Events
		if i > 0 && r.Cumulative.Events < rep.Rules[i-1].Cumulative.Events {
			t.Errorf("cumulative falls at %s", r.Name)
		}
		if rep.Overlap.PassedEvents[i][i] != r.Before.Events || rep.Overlap.KeptEvents[i][i] != r.After.Events {
			t.Errorf("overlap diagonal of %s: %d, %d", r.Name, rep.Overlap.PassedEvents[i][i], rep.Overlap.KeptEvents[i][i])
		}
		for j := range rep.Rules {
			if rep.Overlap.PassedEvents[i][j] != rep.Overlap.PassedEvents[j][i] {
				t.Errorf("overlap not symmetric at %d, %d", i, j)
			}
		}
	}
	if unique > rep.Total.Events {
		t.Errorf("unique events %d exceed the total %d", unique, rep.Total.Events)
	}
}

// fullOptions asks for every section of the report.
func fullOptions(t testing.TB, dir string) Options {
	m, src := starter(t)
	other := parseMenu(t, prescaleMenu)
	var opts Options
	opts.Menu, opts.MenuSource, opts.Compare = m, src, other
	for _, s := range []string{"met-120:met=60:200:10", "two-jets-80:t1=40:120:20"} {
		sc, err := ParseScan(s)
		if err != nil {
			t.Fatal(err)
		}
		opts.Scans = append(opts.Scans, sc)
	}
	for _, s := range []string{"met-120:truth-met=0:300:10", "ht-400:ht"} {
		ef, err := ParseEfficiency(s)
		if err != nil {
			t.Fatal(err)
		}
		opts.Efficiencies = append(opts.Efficiencies, ef)
	}
	opts.Scale = &LumiScale{From: 2e34, To: 5e34}
	if dir != "" {
		opts.RootFile = filepath.Join(dir, ROOTFile)
	}
	opts.Producer = "test"
	return opts
}

// Every section is there and consistent with the rest: the scan point at
// the menu's own threshold is the rule's rate, rates fall as thresholds
// rise, the turn-on fit finds the threshold, the comparison's difference
// is the difference of the two rates, and the scaling is linear.
func TestReportSections(t *testing.T) {
	dir := t.TempDir()
	rep := run(t, toySource(t, 7, 4000), fullOptions(t, dir))
	if err := rep.WriteFiles(dir); err != nil {
		t.Fatal(err)
	}
	var table bytes.Buffer
	if err := rep.WriteTable(&table); err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(table.Bytes(), []byte("not measurements")) || !bytes.Contains(table.Bytes(), []byte("met-120")) {
		t.Errorf("table:\n%s", table.String())
	}
	for _, sc := range rep.Scans {
		rule := rep.Rules[rep.Menu.index(sc.Rule, rep)]
		seen := false
		for i, p := range sc.Points {
			if p.ThresholdGeV == sc.Nominal {
				seen = true
				if p.Before != rule.Before {
					t.Errorf("scan %s at its own threshold: %+v, the rule: %+v", sc.Rule, p.Before, rule.Before)
				}
			}
			if i > 0 && p.Before.Events > sc.Points[i-1].Before.Events {
				t.Errorf("scan %s rises from %v to %v GeV", sc.Rule, sc.Points[i-1].ThresholdGeV, p.ThresholdGeV)
			}
		}
		if !seen {
			t.Errorf("scan %s misses its nominal threshold %v", sc.Rule, sc.Nominal)
		}
	}
	ef := rep.Efficiencies[0]
	if ef.Fit == nil {
		t.Fatalf("met-120 vs truth-met: no fit: %s", ef.FitError)
	}
	// The calorimeter MET is truth MET smeared by the response: its 50%
	// point sits near the 120 GeV threshold (within 15%, a loose check of
	// the chain, not of the fit).
	if math.Abs(ef.Fit.X50-120) > 18 || !(ef.Fit.X50Err > 0) || !(ef.Fit.Sigma > 0) {
		t.Errorf("fit %+v", ef.Fit)
	}
	var total, pass uint64
	for _, b := range ef.Bins {
		total += b.Total
		pass += b.Pass
		if b.Total > 0 && !(*b.Lower <= *b.Efficiency && *b.Efficiency <= *b.Upper) {
			t.Errorf("bin %v..%v: %v not in [%v, %v]", b.Lo, b.Hi, *b.Efficiency, *b.Lower, *b.Upper)
		}
	}
	if total+ef.Underflow.Total+ef.Overflow.Total+ef.Undefined != rep.Processing.Crossings {
		t.Errorf("efficiency counts %d+%d+%d+%d, crossings %d", total, ef.Underflow.Total, ef.Overflow.Total, ef.Undefined, rep.Processing.Crossings)
	}
	c := rep.Comparison
	if c == nil || len(c.Rules) != len(rep.Rules)+4 {
		t.Fatalf("comparison %+v", c)
	}
	for _, cr := range c.Rules {
		var a, b float64
		if cr.MenuAfter != nil {
			a = cr.MenuAfter.RateHz
		}
		if cr.OtherAfter != nil {
			b = cr.OtherAfter.RateHz
		}
		if math.Abs(cr.DiffAfterHz-(b-a)) > 1e-6*math.Max(1, math.Abs(a)+math.Abs(b)) {
			t.Errorf("%s: difference %v, rates %v and %v", cr.Name, cr.DiffAfterHz, a, b)
		}
	}
	if d := c.Total.OtherAfter.RateHz - c.Total.MenuAfter.RateHz; math.Abs(c.Total.DiffAfterHz-d) > 1e-6*math.Abs(d)+1e-9 {
		t.Errorf("total difference %v, want %v", c.Total.DiffAfterHz, d)
	}
	s := rep.Scaling
	if s.Factor != 2.5 || math.Abs(s.Total.RateHz-2.5*rep.Total.RateHz) > 1e-9*s.Total.RateHz || s.MuAtSameBunches != 2.5*rep.Sample.Mu {
		t.Errorf("scaling %+v", s)
	}
}

// index returns the index of the rule called name in rep.
func (MenuInfo) index(name string, rep *Report) int {
	for i, r := range rep.Rules {
		if r.Name == name {
			return i
		}
	}
	return -1
}

// report.root reads back with go-hep's groot, the reference reader: one
// tree entry per event whose bits add up to the report's counts, and
// histograms with the report's entries; the PNG plots decode with the
// size they were drawn at.
func TestROOTFileAndPlotsReadBack(t *testing.T) {
	dir := t.TempDir()
	rep := run(t, toySource(t, 9, 2500), fullOptions(t, dir))
	if err := rep.WriteFiles(dir); err != nil {
		t.Fatal(err)
	}
	f, err := riofs.Open(filepath.Join(dir, ROOTFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	o, err := f.Get(TreeName)
	if err != nil {
		t.Fatal(err)
	}
	tree := o.(rtree.Tree)
	if tree.Entries() != int64(rep.Processing.Crossings) {
		t.Fatalf("tree has %d entries, the report %d crossings", tree.Entries(), rep.Processing.Crossings)
	}
	var (
		orbit         uint64
		bcid          uint32
		accept, passM bool
		met, trueMET  float64
		keepSumet     bool
	)
	r, err := rtree.NewReader(tree, []rtree.ReadVar{
		{Name: "orbit", Value: &orbit}, {Name: "bcid", Value: &bcid}, {Name: "accept", Value: &accept},
		{Name: "pass_met_120", Value: &passM}, {Name: "keep_sumet_900", Value: &keepSumet},
		{Name: "met", Value: &met}, {Name: "true_met", Value: &trueMET},
	})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	var nAccept, nPass, nKeep, entry uint64
	fill := detector.DefaultDescription().Filling
	err = r.Read(func(ctx rtree.RCtx) error {
		wo, wb := fill.Crossing(entry)
		if orbit != wo || bcid != wb {
			t.Fatalf("entry %d is orbit %d bcid %d, want crossing %d (%d, %d)", entry, orbit, bcid, entry, wo, wb)
		}
		if passM != (met > 120) {
			t.Fatalf("entry %d: met %v but pass_met_120 %v", entry, met, passM)
		}
		entry++
		for _, c := range []struct {
			b bool
			n *uint64
		}{{accept, &nAccept}, {passM, &nPass}, {keepSumet, &nKeep}} {
			if c.b {
				*c.n++
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if nAccept != rep.Total.Events || nPass != rep.Rules[0].Before.Events || nKeep != rep.Rules[1].After.Events {
		t.Errorf("tree counts accept %d, pass met-120 %d, keep sumet-900 %d; report %d, %d, %d",
			nAccept, nPass, nKeep, rep.Total.Events, rep.Rules[0].Before.Events, rep.Rules[1].After.Events)
	}

	for k, sc := range rep.Scans {
		o, err := f.Get(ScanHistName(k, sc))
		if err != nil {
			t.Fatal(err)
		}
		h := o.(*rhist.H1D)
		var entries uint64
		for i, p := range sc.Points {
			entries += p.Before.Events
			if c, e := h.XBinContent(i+1), h.XBinError(i+1); math.Abs(c-p.Before.RateHz) > 1e-9*c || math.Abs(e-p.Before.ErrorHz) > 1e-6*e+1e-12 {
				t.Errorf("scan %d bin %d: %v ± %v, report %v ± %v", k, i, c, e, p.Before.RateHz, p.Before.ErrorHz)
			}
			if x := h.XBinCenter(i + 1); math.Abs(x-p.ThresholdGeV) > 1e-9 {
				t.Errorf("scan %d bin %d centred at %v, threshold %v", k, i, x, p.ThresholdGeV)
			}
		}
		if h.Entries() != float64(entries) || h.NbinsX() != len(sc.Points) {
			t.Errorf("scan %d: %v entries in %d bins, want %d in %d", k, h.Entries(), h.NbinsX(), entries, len(sc.Points))
		}
	}
	for k := range rep.Efficiencies {
		ef := &rep.Efficiencies[k]
		nt, np, ng := TurnOnHistNames(k, ef)
		var total, pass uint64
		filled := 0
		for _, b := range ef.Bins {
			total += b.Total
			pass += b.Pass
			if b.Total > 0 {
				filled++
			}
		}
		for _, c := range []struct {
			name string
			want uint64
		}{{nt, total + ef.Underflow.Total + ef.Overflow.Total}, {np, pass + ef.Underflow.Pass + ef.Overflow.Pass}} {
			o, err := f.Get(c.name)
			if err != nil {
				t.Fatal(err)
			}
			if h := o.(*rhist.H1D); h.Entries() != float64(c.want) || h.NbinsX() != len(ef.Bins) {
				t.Errorf("%s: %v entries in %d bins, want %d in %d", c.name, h.Entries(), h.NbinsX(), c.want, len(ef.Bins))
			}
		}
		o, err := f.Get(ng)
		if err != nil {
			t.Fatal(err)
		}
		if g := o.(rhist.GraphErrors); g.Len() != filled {
			t.Errorf("%s has %d points, %d bins have events", ng, g.Len(), filled)
		}
	}

	names := rep.PlotFiles()
	if len(names) != len(rep.Scans)+1+len(rep.Efficiencies) {
		t.Fatalf("plots %v", names)
	}
	for _, name := range names {
		data, err := os.ReadFile(filepath.Join(dir, name+".png"))
		if err != nil {
			t.Fatal(err)
		}
		cfg, format, err := image.DecodeConfig(bytes.NewReader(data))
		if err != nil {
			t.Fatalf("%s.png: %v", name, err)
		}
		w, h := 800, 500
		if name == "overlap" {
			w, h = 700, 620
		}
		if format != "png" || cfg.Width != w || cfg.Height != h {
			t.Errorf("%s.png is %s %dx%d, want png %dx%d", name, format, cfg.Width, cfg.Height, w, h)
		}
		svg, err := os.ReadFile(filepath.Join(dir, name+".svg"))
		if err != nil || !bytes.Contains(svg, []byte("<svg")) {
			t.Errorf("%s.svg: %v", name, err)
		}
	}
}

// The same input and seed give byte-identical report.json and rates.csv,
// whatever the number of workers.
func TestReportDeterministic(t *testing.T) {
	var jsons, csvs [][]byte
	for _, w := range []int{2, 2, 1, 3} {
		opts := fullOptions(t, "")
		opts.Workers = w
		rep := run(t, toySource(t, 5, 1500), opts)
		j, err := rep.JSON()
		if err != nil {
			t.Fatal(err)
		}
		jsons, csvs = append(jsons, j), append(csvs, rep.CSV())
	}
	for i := 1; i < len(jsons); i++ {
		if !bytes.Equal(jsons[i], jsons[0]) || !bytes.Equal(csvs[i], csvs[0]) {
			t.Fatalf("run %d differs from run 0", i)
		}
	}
	other := run(t, toySource(t, 6, 1500), fullOptions(t, ""))
	if j, _ := other.JSON(); bytes.Equal(j, jsons[0]) {
		t.Error("another seed gives the same report")
	}
}

// A recorded stream, read by a reader, decoding goroutines and the
// builder's feeder, gives byte-identical report.json and rates.csv
// whatever the number of workers, truth records included.
func TestReportDeterministicStream(t *testing.T) {
	gen, part := physicsGen(t, 12, detector.PhysicsConfig{Mu: 20, LibraryEvents: 60})
	path := recordStream(t, gen, part, 1200, true)
	var jsons, csvs [][]byte
	for _, w := range []int{1, 2, 3, 2} {
		src, err := replay.OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		opts := fullOptions(t, "")
		opts.Workers = w
		rep := run(t, src, opts)
		src.Close()
		if rep.Processing.Crossings != 1200 || rep.Processing.TruthMatched != 1200 {
			t.Fatalf("workers %d: processing %+v", w, rep.Processing)
		}
		j, err := rep.JSON()
		if err != nil {
			t.Fatal(err)
		}
		jsons, csvs = append(jsons, j), append(csvs, rep.CSV())
	}
	for i := 1; i < len(jsons); i++ {
		if !bytes.Equal(jsons[i], jsons[0]) || !bytes.Equal(csvs[i], csvs[0]) {
			t.Fatalf("run %d differs from run 0", i)
		}
	}
}

// A forced-process sample is weighted: each crossing weighs the expected
// number of interactions of the process per crossing, and rates are the
// sum of passing weights over the crossings times the crossing rate.
func TestWeightedSample(t *testing.T) {
	src, err := replay.NewGeneratorSource(replay.GeneratorConfig{Seed: 3, Crossings: 600,
		Generator: detector.GeneratorConfig{Kind: detector.GeneratorPhysics, Physics: detector.PhysicsConfig{Mu: 5, Force: "w-enu", LibraryEvents: 50}}})
	if err != nil {
		t.Fatal(err)
	}
	m := parseMenu(t, prescaleMenu)
	rep := run(t, src, Options{Menu: m})
	if !rep.Sample.Weighted {
		t.Fatal("forced sample not weighted")
	}
	w := rep.Processing.SumWeights / float64(rep.Processing.Crossings)
	if !(w > 0 && w < 1e-3) || math.Abs(rep.Processing.SumWeights2-float64(rep.Processing.Crossings)*w*w) > 1e-9*rep.Processing.SumWeights2 {
		t.Fatalf("weights: sum %v, sum of squares %v", rep.Processing.SumWeights, rep.Processing.SumWeights2)
	}
	r := rep.Rules[0].Before
	n := float64(rep.Processing.Crossings)
	rate := rep.Sample.CrossingRateHz
	if want := float64(r.Events) * w / n * rate; math.Abs(r.RateHz-want) > 1e-9*want {
		t.Errorf("weighted rate %v, want %v", r.RateHz, want)
	}
	// With equal weights the error is w times the unweighted binomial one.
	k := float64(r.Events)
	if want := w * math.Sqrt(k*(n-k)/n) / n * rate; math.Abs(r.ErrorHz-want) > 1e-6*want {
		t.Errorf("weighted error %v, want %v", r.ErrorHz, want)
	}
}

// A stream with truth records gives the turn-on its truth reference; a
// stream without refuses a truth reference with a clear error.
func TestTruthReferenceNeedsTruth(t *testing.T) {
	gen, part := physicsGen(t, 8, detector.PhysicsConfig{Mu: 5, LibraryEvents: 50})
	path := recordStream(t, gen, part, 200, false)
	src, err := replay.OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	m, text := starter(t)
	ef, _ := ParseEfficiency("met-120:truth-met")
	if _, err := Run(context.Background(), src, Options{Menu: m, MenuSource: text, Efficiencies: []EfficiencySpec{ef}}); err == nil {
		t.Fatal("a truth reference on a stream without truth was accepted")
	}
	path = recordStream(t, gen, part, 200, true)
	src2, err := replay.OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer src2.Close()
	rep := run(t, src2, Options{Menu: m, Efficiencies: []EfficiencySpec{ef}})
	if rep.Processing.TruthMatched != 200 || rep.Efficiencies[0].Undefined != 0 {
		t.Errorf("truth matched %d, undefined %d", rep.Processing.TruthMatched, rep.Efficiencies[0].Undefined)
	}
}

// A stream cut short is reported over what was read before the damage,
// says where reading stopped, and Run says the input was damaged.
func TestDamagedStreamIsReported(t *testing.T) {
	gen, part := physicsGen(t, 8, detector.PhysicsConfig{Mu: 5, LibraryEvents: 50})
	path := recordStream(t, gen, part, 3000, false)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	// Cut into the last of the stream's frames (a frame holds 1 MiB of
	// batches): those before it are read, the crossings of the rest lost.
	if err := os.WriteFile(path, data[:len(data)-200], 0o644); err != nil {
		t.Fatal(err)
	}
	src, err := replay.OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	m, _ := starter(t)
	rep, err := Run(context.Background(), src, Options{Menu: m})
	if !errors.Is(err, ErrDamagedInput) || rep == nil {
		t.Fatalf("err %v, report %v", err, rep != nil)
	}
	if rep.Processing.InputError == "" || rep.Processing.Crossings == 0 || rep.Processing.Crossings >= 3000 {
		t.Errorf("processing %+v", rep.Processing)
	}
}
