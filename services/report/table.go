package report

import (
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"
)

// rateText prints a rate and its error with three significant digits.
func rateText(r Rate) string {
	return fmt.Sprintf("%s ± %s", si(r.RateHz), si(r.ErrorHz))
}

// si prints a value in Hz with an SI prefix and three significant digits.
func si(v float64) string {
	a := math.Abs(v)
	switch {
	case v == 0:
		return "0"
	case a >= 1e6:
		return fmt.Sprintf("%.3gM", v/1e6)
	case a >= 1e3:
		return fmt.Sprintf("%.3gk", v/1e3)
	}
	return fmt.Sprintf("%.3g", v)
}

// unitSuffix is a unit written after a number, with its space; nothing for
// a dimensionless quantity.
func unitSuffix(unit string) string {
	if unit == "" {
		return ""
	}
	return " " + unit
}

// WriteTable prints the report for a terminal: the sample, the menu's
// rates, and the optional sections in short.
func (r *Report) WriteTable(w io.Writer) error {
	var b strings.Builder
	s := r.Sample
	src := s.Path
	if s.Kind == "generator" {
		src = fmt.Sprintf("%s generator, seed %d", s.Generator, s.Seed)
	}
	fmt.Fprintf(&b, "menu %s (hash %s), prescale set %s\n", r.Menu.Name, r.Menu.Hash, r.Menu.PrescaleSet)
	mu := "unknown"
	if s.Mu > 0 {
		mu = fmt.Sprintf("%.3g", s.Mu)
	}
	fmt.Fprintf(&b, "sample: %s; %d crossings, mu %s, %d sources", src, r.Processing.Crossings, mu, s.Sources)
	if s.Weighted {
		fmt.Fprintf(&b, ", weighted (sum of weights %.4g)", r.Processing.SumWeights)
	}
	fmt.Fprintf(&b, "\ncolliding-crossing rate %s Hz (%d bunches x %g Hz, %s)\n", si(s.CrossingRateHz), s.CollidingBunch, s.RevolutionHz, s.FillingScheme)
	if p := r.Processing; p.EventsIncomplete > 0 || p.InputError != "" {
		fmt.Fprintf(&b, "events: %d complete, %d incomplete", p.EventsComplete, p.EventsIncomplete)
		if p.InputError != "" {
			fmt.Fprintf(&b, "; input ended early: %s", p.InputError)
		}
		b.WriteByte('\n')
	}
	fmt.Fprintf(&b, "note: %s\n\n", r.Caveat)

	tw := tabwriter.NewWriter(&b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "rule\tprescale\tpassed\tbefore prescale [Hz]\tafter prescale [Hz]\tunique [Hz]\tcumulative [Hz]\t")
	for _, rr := range r.Rules {
		ps := fmt.Sprint(rr.Prescale)
		if rr.Prescale == 0 {
			ps = "off"
		}
		fmt.Fprintf(tw, "%s\t%s\t%d\t%s\t%s\t%s\t%s\t\n", rr.Name, ps, rr.Before.Events, rateText(rr.Before), rateText(rr.After), rateText(rr.Unique), rateText(rr.Cumulative))
	}
	// The passed column counts events before prescale; the menu's total
	// is of events kept, so its cell stays empty (report.json and
	// rates.csv give the kept count).
	fmt.Fprintf(tw, "total\t\t\t\t%s\t\t\t\n", rateText(r.Total))
	tw.Flush()

	if sc := r.Scaling; sc != nil {
		fmt.Fprintf(&b, "\nscaled from %.3g to %.3g cm^-2 s^-1 (x%.4g): total %s Hz", sc.FromLumi, sc.ToLumi, sc.Factor, si(sc.Total.RateHz))
		if sc.MuAtSameBunches > 0 {
			fmt.Fprintf(&b, "; at the same bunches the pile-up would be %.3g: regenerate at that mu for rates there", sc.MuAtSameBunches)
		}
		fmt.Fprintf(&b, "\n  %s\n", sc.Validity)
	}
	for _, sc := range r.Scans {
		fmt.Fprintf(&b, "\nscan of %s, %s (nominal %g GeV), rate before prescale:\n", sc.Rule, sc.Threshold, sc.Nominal)
		tw := tabwriter.NewWriter(&b, 2, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "threshold [GeV]\tpassed\trate [Hz]\t")
		for _, p := range sc.Points {
			fmt.Fprintf(tw, "%g\t%d\t%s\t\n", p.ThresholdGeV, p.Before.Events, rateText(p.Before))
		}
		tw.Flush()
	}
	for _, ef := range r.Efficiencies {
		fmt.Fprintf(&b, "\nefficiency of %s vs %s: ", ef.Rule, ef.Reference)
		if f := ef.Fit; f != nil {
			plateau := fmt.Sprintf("%.4f ± %.4f", f.Plateau, f.PlateauErr)
			if f.PlateauFixed {
				plateau = "1 (fixed at the limit)"
			}
			fmt.Fprintf(&b, "50%% point %.4g ± %.2g%s, width %.3g ± %.2g%s, plateau %s (deviance %.1f for %d degrees of freedom%s)\n",
				f.X50, f.X50Err, unitSuffix(ef.Unit), f.Sigma, f.SigmaErr, unitSuffix(ef.Unit), plateau, f.Deviance, f.NDF, fitQuality(f.PValue))
		} else {
			fmt.Fprintf(&b, "no fit (%s)\n", ef.FitError)
		}
	}
	if c := r.Comparison; c != nil {
		fmt.Fprintf(&b, "\ncompared with menu %s (hash %s), prescale set %s; difference = other - this:\n", c.Menu.Name, c.Menu.Hash, c.Menu.PrescaleSet)
		tw := tabwriter.NewWriter(&b, 2, 4, 2, ' ', 0)
		this, other := r.Menu.Name, c.Menu.Name
		if this == other {
			this, other = "this menu", "other menu"
		}
		fmt.Fprintf(tw, "rule\t%s [Hz]\t%s [Hz]\tdifference [Hz]\t\n", this, other)
		opt := func(p *Rate) string {
			if p == nil {
				return "-"
			}
			return rateText(*p)
		}
		for _, cr := range c.Rules {
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s ± %s\t\n", cr.Name, opt(cr.MenuAfter), opt(cr.OtherAfter), si(cr.DiffAfterHz), si(cr.DiffAfterErrHz))
		}
		fmt.Fprintf(tw, "total\t%s\t%s\t%s ± %s\t\n", opt(c.Total.MenuAfter), opt(c.Total.OtherAfter), si(c.Total.DiffAfterHz), si(c.Total.DiffAfterErrHz))
		tw.Flush()
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// poorFitP is the p-value below which the summary says that the curve
// does not describe the bins: 1%, our own choice of a conventional level
// (common practice for goodness-of-fit tests).
const poorFitP = 0.01

// fitQuality gives the p-value of a fit's deviance for the summary, with
// a warning below poorFitP.
func fitQuality(p *float64) string {
	switch {
	case p == nil:
		return ""
	case *p < poorFitP:
		return fmt.Sprintf(", p = %.2g: POOR FIT, the curve does not describe these bins; read the bins, not the parameters", *p)
	default:
		return fmt.Sprintf(", p = %.2f", *p)
	}
}
