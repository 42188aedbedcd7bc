package report

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/services/report/stats"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// report turns the counts into the Report.
func (a *accumulator) report(sum replay.Summary) *Report {
	s := a.sample
	d := s.Description
	rep := &Report{
		Schema: SchemaName, SchemaVersion: SchemaVersion, Caveat: Caveat, Producer: a.opts.Producer,
		ConfidenceLevel: a.opts.ConfidenceLevel,
		Sample: SampleInfo{
			Kind: s.Kind, Path: s.Path, Generator: s.Generator, GeneratorConfig: s.GeneratorConfig, Seed: s.Seed,
			Mu: s.Mu, Run: s.Run, Sources: len(s.Sources), Truth: s.Truth, Weighted: a.weighted,
			Detector: d.Config.Name, FillingScheme: d.Filling.Name, CollidingBunch: d.Filling.Colliding(),
			RevolutionHz: detector.RevolutionHz, CrossingRateHz: crossingRate(d),
		},
		Menu: menuInfo(a.menu, a.set),
	}
	p := &rep.Processing
	p.Crossings, p.SumWeights, p.SumWeights2 = a.all.N, a.all.SumW, a.all.SumW2
	b := sum.Builder
	p.EventsComplete, p.EventsIncomplete = b.EventsComplete, b.EventsIncomplete
	p.Fragments.Received, p.Fragments.InEvents, p.Fragments.Duplicate, p.Fragments.Late = b.Received, b.InEvents, b.Duplicate, b.Late
	p.Fragments.Malformed, p.Fragments.UnknownSource, p.Fragments.OutOfTime = b.Malformed, b.UnknownSource, b.OutOfTime
	p.Batches, p.BatchesUndecodable = sum.Batches, sum.Undecodable
	p.TruthRecords, p.TruthMatched, p.InputError = sum.TruthRecords, sum.TruthMatched, sum.InputError

	var cumul stats.Count
	for i, r := range a.menu.Rules {
		cumul.Merge(a.first[i])
		rep.Rules = append(rep.Rules, RuleRates{
			Name: r.Name, Index: i, Condition: condition(&r), Prescale: a.pres[i], Disabled: r.Disabled, PassThrough: r.PassThrough(),
			Before: a.rate(a.passed[i]), After: a.rate(a.kept[i]), Unique: a.rate(a.unique[i]), Cumulative: a.rate(cumul),
		})
	}
	rep.Total = a.rate(a.total)
	rep.Overlap = a.overlap()
	rep.Scaling = a.scaling(rep)
	for _, sc := range a.scans {
		out := Scan{Rule: sc.spec.Rule, Param: sc.spec.Param, Threshold: sc.th.context, Nominal: sc.th.gev, Prescale: sc.prescale}
		for k, v := range sc.points {
			out.Points = append(out.Points, ScanPoint{ThresholdGeV: v, Condition: sc.conds[k], Before: a.rate(sc.passed[k]), After: a.rate(sc.kept[k])})
		}
		rep.Scans = append(rep.Scans, out)
	}
	for _, ef := range a.effs {
		rep.Efficiencies = append(rep.Efficiencies, a.efficiency(&ef))
	}
	if a.cmp != nil {
		rep.Comparison = a.comparison()
	}
	return rep
}

func menuInfo(m *trigger.Menu, set string) MenuInfo {
	return MenuInfo{Name: m.Name, Hash: m.Hash, File: m.File, PrescaleSet: set}
}

func condition(r *trigger.RuleSpec) string {
	if r.PassThrough() {
		return fmt.Sprintf("every event (keep_fraction %g)", r.KeepFraction)
	}
	return r.When
}

func (a *accumulator) overlap() Overlap {
	n := a.nRules
	ov := Overlap{}
	rate := crossingRate(a.sample.Description)
	for i, r := range a.menu.Rules {
		ov.Rules = append(ov.Rules, r.Name)
		pe, pr, pf := make([]uint64, n), make([]float64, n), make([]float64, n)
		ke, kr := make([]uint64, n), make([]float64, n)
		for j := range n {
			pe[j], ke[j] = a.ovPassed[i][j].N, a.ovKept[i][j].N
			pr[j], _ = a.ovPassed[i][j].Rate(a.all.N, rate)
			kr[j], _ = a.ovKept[i][j].Rate(a.all.N, rate)
			if w := a.passed[i].SumW; w > 0 {
				pf[j] = a.ovPassed[i][j].SumW / w
			}
		}
		ov.PassedEvents, ov.PassedRateHz, ov.PassedFraction = append(ov.PassedEvents, pe), append(ov.PassedRateHz, pr), append(ov.PassedFraction, pf)
		ov.KeptEvents, ov.KeptRateHz = append(ov.KeptEvents, ke), append(ov.KeptRateHz, kr)
	}
	return ov
}

// scalingValidity is the report's statement of when the linear scaling
// holds.
const scalingValidity = "Linear in luminosity only at fixed pile-up: valid when the luminosity changes through the number " +
	"of colliding bunches (or the run time) while the interactions per crossing stay the same. It is not valid when " +
	"the pile-up changes: rules on pile-up-sensitive quantities (sum ET, MET, HT, soft jets) then grow faster than " +
	"linearly, and only a sample regenerated at the new pile-up gives their rates."

func (a *accumulator) scaling(rep *Report) *Scaling {
	ls := a.opts.Scale
	if ls == nil {
		return nil
	}
	f := ls.To / ls.From
	sc := &Scaling{FromLumi: ls.From, ToLumi: ls.To, Factor: f, Validity: scalingValidity}
	if a.sample.Mu > 0 {
		sc.MuAtSameBunches = a.sample.Mu * f
	}
	for _, r := range rep.Rules {
		sc.Rules = append(sc.Rules, ScaledRate{Name: r.Name, RateHz: r.After.RateHz * f, ErrorHz: r.After.ErrorHz * f})
	}
	sc.Total = ScaledRate{Name: "total", RateHz: rep.Total.RateHz * f, ErrorHz: rep.Total.ErrorHz * f}
	return sc
}

func (a *accumulator) efficiency(ef *effAcc) Efficiency {
	out := Efficiency{Rule: ef.spec.Rule, Reference: ef.ref.name, About: ef.ref.about, Unit: ef.ref.unit,
		Underflow: ef.under, Overflow: ef.over, Undefined: ef.undefined}
	var bins []stats.EffBin
	for k := range ef.total {
		b := EffBin{Lo: ef.edges[k], Hi: ef.edges[k+1], Total: ef.total[k], Pass: ef.pass[k]}
		if b.Total > 0 {
			e := float64(b.Pass) / float64(b.Total)
			lo, hi := stats.ClopperPearson(int(b.Pass), int(b.Total), a.opts.ConfidenceLevel)
			b.Efficiency, b.Lower, b.Upper = &e, &lo, &hi
		}
		out.Bins = append(out.Bins, b)
		bins = append(bins, stats.EffBin{X: (b.Lo + b.Hi) / 2, Pass: int(b.Pass), Total: int(b.Total), Width: b.Hi - b.Lo})
	}
	fit, err := stats.FitTurnOn(bins)
	if err != nil {
		// The stats package does not know the unit of the reference: an
		// undetermined parameter is restated with it.
		var u *stats.UndeterminedError
		if errors.As(err, &u) {
			withUnit := *u
			withUnit.Unit = ef.ref.unit
			err = &withUnit
		}
		out.FitError = fitReason(err)
	} else {
		out.Fit = &ErfFit{X50: fit.X50, X50Err: fit.X50Err, Sigma: fit.Sigma, SigmaErr: fit.SigmaErr,
			Plateau: fit.Plateau, PlateauErr: fit.PlateauErr, PlateauFixed: fit.PlateauFixed, Covariance: fit.Cov, Deviance: fit.Deviance, NDF: fit.NDF}
		if !math.IsNaN(fit.PValue) {
			p := fit.PValue
			out.Fit.PValue = &p
		}
	}
	return out
}

// fitReason is a failed fit's error as the report gives it: the reason
// alone, without the package's prefix and the sentinel's "turn-on fit
// failed", which the report's "no fit" already says.
func fitReason(err error) string {
	msg := err.Error()
	if rest, ok := strings.CutPrefix(msg, stats.ErrFitFailed.Error()+": "); ok {
		return rest
	}
	return strings.TrimPrefix(msg, "stats: ")
}

func (a *accumulator) comparison() *Comparison {
	c := a.cmp
	out := &Comparison{Menu: menuInfo(c.menu, c.set)}
	ptr := func(r Rate) *Rate { return &r }
	for k, pr := range c.pairs {
		i, j := pr[0], pr[1]
		cr := ComparedRule{Name: a.menu.Rules[i].Name, In: "both", ComparedRates: ComparedRates{
			MenuBefore: ptr(a.rate(a.passed[i])), OtherBefore: ptr(a.rate(c.passed[j])),
			MenuAfter: ptr(a.rate(a.kept[i])), OtherAfter: ptr(a.rate(c.kept[j])),
		}}
		cr.DiffBeforeHz, cr.DiffBeforeErrHz = a.difference(c.diffBeforeA[k], c.diffBeforeB[k])
		cr.DiffAfterHz, cr.DiffAfterErrHz = a.difference(c.diffAfterA[k], c.diffAfterB[k])
		out.Rules = append(out.Rules, cr)
	}
	for _, i := range c.onlyMain {
		before, after := a.rate(a.passed[i]), a.rate(a.kept[i])
		cr := ComparedRule{Name: a.menu.Rules[i].Name, In: "menu", ComparedRates: ComparedRates{MenuBefore: &before, MenuAfter: &after}}
		cr.DiffBeforeHz, cr.DiffBeforeErrHz = a.difference(a.passed[i], stats.Count{})
		cr.DiffAfterHz, cr.DiffAfterErrHz = a.difference(a.kept[i], stats.Count{})
		out.Rules = append(out.Rules, cr)
	}
	for _, j := range c.onlyOth {
		before, after := a.rate(c.passed[j]), a.rate(c.kept[j])
		cr := ComparedRule{Name: c.menu.Rules[j].Name, In: "other", ComparedRates: ComparedRates{OtherBefore: &before, OtherAfter: &after}}
		cr.DiffBeforeHz, cr.DiffBeforeErrHz = a.difference(stats.Count{}, c.passed[j])
		cr.DiffAfterHz, cr.DiffAfterErrHz = a.difference(stats.Count{}, c.kept[j])
		out.Rules = append(out.Rules, cr)
	}
	out.Total = ComparedRates{MenuAfter: ptr(a.rate(a.total)), OtherAfter: ptr(a.rate(c.total))}
	out.Total.DiffAfterHz, out.Total.DiffAfterErrHz = a.difference(c.diffTotalA, c.diffTotalB)
	return out
}
