package report

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// ErrBadSpec is wrapped by every error of ParseScan, ParseEfficiency and
// ParseLumiScale.
var ErrBadSpec = errors.New("report: bad specification")

// Range is a sequence of values From, From+Step, ... up to To (included
// when it falls on a step, within a millionth of a step).
type Range struct {
	From, To, Step float64
}

// Values returns the points of the range.
func (r Range) Values() []float64 {
	n := int(math.Floor((r.To-r.From)/r.Step+1e-6)) + 1
	out := make([]float64, n)
	for i := range out {
		// Computed from the start each time, so errors do not pile up.
		out[i] = r.From + float64(i)*r.Step
	}
	return out
}

// maxPoints bounds a range, so a typo cannot ask for a billion points.
const maxPoints = 10000

func parseRange(s, what string) (Range, error) {
	parts := strings.Split(s, ":")
	if len(parts) != 3 {
		return Range{}, fmt.Errorf("%w: %s %q: want FROM:TO:STEP, such as 50:200:10", ErrBadSpec, what, s)
	}
	var v [3]float64
	for i, p := range parts {
		x, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			return Range{}, fmt.Errorf("%w: %s %q: %q is not a finite number", ErrBadSpec, what, s, p)
		}
		v[i] = x
	}
	r := Range{From: v[0], To: v[1], Step: v[2]}
	switch {
	case !(r.Step > 0):
		return r, fmt.Errorf("%w: %s %q: the step must be > 0", ErrBadSpec, what, s)
	case !(r.To > r.From):
		return r, fmt.Errorf("%w: %s %q: TO must be above FROM", ErrBadSpec, what, s)
	case (r.To-r.From)/r.Step > maxPoints:
		return r, fmt.Errorf("%w: %s %q: more than %d points", ErrBadSpec, what, s, maxPoints)
	}
	return r, nil
}

// ScanSpec asks for the rate of a rule as one threshold of its condition
// moves over a range. Param names the threshold: "tN" is the N-th energy
// threshold (a number in GeV) of the rule's canonical condition, counting
// from 1 left to right; any other name is the quantity compared with the
// threshold, such as "met", "ht", "jets[0].et" or "et" inside a count,
// which must then be compared with exactly one energy in the condition.
type ScanSpec struct {
	Rule   string
	Param  string
	Values Range // GeV
}

// ParseScan parses RULE:PARAM=FROM:TO:STEP, thresholds in GeV.
func ParseScan(s string) (ScanSpec, error) {
	rule, rest, ok := strings.Cut(s, ":")
	param, rng, ok2 := strings.Cut(rest, "=")
	if !ok || !ok2 || rule == "" || param == "" {
		return ScanSpec{}, fmt.Errorf("%w: scan %q: want RULE:PARAM=FROM:TO:STEP, such as met-120:met=60:200:10 or met-120:t1=60:200:10", ErrBadSpec, s)
	}
	r, err := parseRange(rng, "scan "+rule+":"+param)
	if err != nil {
		return ScanSpec{}, err
	}
	return ScanSpec{Rule: rule, Param: param, Values: r}, nil
}

// EfficiencySpec asks for the efficiency of a rule's condition (before
// prescale) versus a reference quantity, in bins. Reference is a truth
// quantity (see References) or a quantity of the menu's features (met,
// sumet, ht, jets[0].et, count(jets)). Bins holds the bin edges' range;
// zero means a default range derived from the rule's first threshold.
type EfficiencySpec struct {
	Rule      string
	Reference string
	Bins      Range
}

// ParseEfficiency parses RULE:REFERENCE or RULE:REFERENCE=FROM:TO:STEP,
// where FROM:TO:STEP are the bin edges.
func ParseEfficiency(s string) (EfficiencySpec, error) {
	rule, rest, ok := strings.Cut(s, ":")
	if !ok || rule == "" || rest == "" {
		return EfficiencySpec{}, fmt.Errorf("%w: efficiency %q: want RULE:REFERENCE[=FROM:TO:STEP], such as met-120:truth-met=0:300:10", ErrBadSpec, s)
	}
	ref, rng, hasRange := strings.Cut(rest, "=")
	spec := EfficiencySpec{Rule: rule, Reference: strings.TrimSpace(ref)}
	if spec.Reference == "" {
		return spec, fmt.Errorf("%w: efficiency %q: the reference quantity is empty", ErrBadSpec, s)
	}
	if hasRange {
		r, err := parseRange(rng, "efficiency "+rule+":"+ref)
		if err != nil {
			return spec, err
		}
		spec.Bins = r
	}
	return spec, nil
}

// LumiScale asks for the rates scaled linearly from the sample's
// luminosity From to the luminosity To (cm^-2 s^-1).
type LumiScale struct {
	From, To float64
}

// ParseLumiScale parses FROM:TO, two positive luminosities such as
// 2e34:5e34.
func ParseLumiScale(s string) (LumiScale, error) {
	a, b, ok := strings.Cut(s, ":")
	if !ok {
		return LumiScale{}, fmt.Errorf("%w: luminosity scaling %q: want FROM:TO in cm^-2 s^-1, such as 2e34:5e34", ErrBadSpec, s)
	}
	from, err1 := strconv.ParseFloat(strings.TrimSpace(a), 64)
	to, err2 := strconv.ParseFloat(strings.TrimSpace(b), 64)
	if err1 != nil || err2 != nil || !(from > 0) || !(to > 0) || math.IsInf(from, 0) || math.IsInf(to, 0) {
		return LumiScale{}, fmt.Errorf("%w: luminosity scaling %q: want two finite luminosities > 0, such as 2e34:5e34", ErrBadSpec, s)
	}
	return LumiScale{From: from, To: to}, nil
}
