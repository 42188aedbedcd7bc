package report

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// truthReference computes a reference quantity from a crossing's truth
// record; ok is false when the crossing has none (no lepton, no parton).
type truthReference struct {
	about string
	unit  string
	eval  func(t *recording.TruthRecord, etaMax float64) (float64, bool)
}

// truthReferences are the truth quantities an efficiency can be measured
// against.
var truthReferences = map[string]truthReference{
	"truth-met": {"magnitude of the true missing transverse momentum (non-interacting particles and everything outside the calorimeter)", "GeV",
		func(t *recording.TruthRecord, _ float64) (float64, bool) {
			return math.Hypot(t.TrueMETx, t.TrueMETy), true
		}},
	"truth-invisible-pt": {"transverse momentum of the invisible particles alone (neutrinos and invented invisible particles)", "GeV",
		func(t *recording.TruthRecord, _ float64) (float64, bool) {
			return math.Hypot(t.Truth.InvisibleX, t.Truth.InvisibleY), true
		}},
	"truth-jet-pt": {"pT of the leading hard-process parton (quark, b quark or gluon) inside the calorimeter acceptance: a parton-level stand-in for the leading truth jet", "GeV",
		func(t *recording.TruthRecord, etaMax float64) (float64, bool) {
			return leading(t, etaMax, detector.ObjectQuark, detector.ObjectBQuark, detector.ObjectGluon)
		}},
	"truth-lepton-pt": {"pT of the leading generated electron or muon", "GeV",
		func(t *recording.TruthRecord, _ float64) (float64, bool) {
			return leading(t, math.Inf(1), detector.ObjectElectron, detector.ObjectMuon)
		}},
	"truth-electron-pt": {"pT of the leading generated electron", "GeV",
		func(t *recording.TruthRecord, _ float64) (float64, bool) {
			return leading(t, math.Inf(1), detector.ObjectElectron)
		}},
	"truth-muon-pt": {"pT of the leading generated muon", "GeV",
		func(t *recording.TruthRecord, _ float64) (float64, bool) {
			return leading(t, math.Inf(1), detector.ObjectMuon)
		}},
}

// References returns the names of the truth reference quantities, sorted.
func References() []string {
	var names []string
	for n := range truthReferences {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

func leading(t *recording.TruthRecord, etaMax float64, kinds ...detector.ObjectKind) (float64, bool) {
	best, ok := 0.0, false
	for _, o := range t.Truth.Objects {
		for _, k := range kinds {
			if o.Kind == k && math.Abs(o.Eta) < etaMax && (!ok || o.PT > best) {
				best, ok = o.PT, true
			}
		}
	}
	return best, ok
}

// reference is a resolved reference quantity: a truth quantity, or a
// feature quantity read from the event's Values at index value.
type reference struct {
	name  string
	about string
	unit  string
	truth *truthReference
	value int
}

// resolveReference finds the reference quantity called name: a truth
// quantity (which needs a sample with truth), or a quantity of menu m's
// features. For a feature quantity it appends to values and notes where.
func resolveReference(name string, m *trigger.Menu, hasTruth bool, values *[]replay.Quantity) (reference, error) {
	if tr, ok := truthReferences[name]; ok {
		if !hasTruth {
			return reference{}, fmt.Errorf("%w: reference %s needs generator truth, and the sample has none (record the stream with truth, or replay with --generate)", ErrBadSpec, name)
		}
		return reference{name: name, about: tr.about, unit: tr.unit, truth: &tr}, nil
	}
	if strings.HasPrefix(name, "truth-") {
		return reference{}, fmt.Errorf("%w: unknown truth reference %q (known: %s)", ErrBadSpec, name, strings.Join(References(), ", "))
	}
	q, err := replay.ParseQuantity(name)
	if err != nil {
		return reference{}, fmt.Errorf("%w: reference %q is neither a truth quantity (%s) nor a feature: %v", ErrBadSpec, name, strings.Join(References(), ", "), err)
	}
	if err := q.Check(m); err != nil {
		return reference{}, fmt.Errorf("%w: reference %q: %v", ErrBadSpec, name, err)
	}
	unit := "GeV"
	if strings.HasPrefix(name, "count(") || strings.HasSuffix(name, ".eta") || strings.HasSuffix(name, ".phi") || name == "met_phi" {
		unit = ""
	}
	*values = append(*values, q)
	return reference{name: name, about: "the feature " + name + " of the menu, as the selection computes it", unit: unit, value: len(*values) - 1}, nil
}

// eval returns the reference's value for an event.
func (r *reference) eval(e *replay.Event, etaMax float64) (float64, bool) {
	if r.truth != nil {
		if e.Truth == nil {
			return 0, false
		}
		return r.truth.eval(e.Truth, etaMax)
	}
	v := e.Values[r.value]
	return v, !math.IsNaN(v)
}
