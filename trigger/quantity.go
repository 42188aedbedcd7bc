package trigger

import (
	"errors"
	"math"
	"strconv"
	"strings"
)

// Energy units: the exponent of ten that converts each to GeV. Parsing
// shifts the decimal exponent of the written number instead of multiplying,
// so "0.15 TeV" is exactly the float64 nearest to 150, as "150 GeV" is.
var energyUnits = map[string]int{"GeV": 0, "TeV": 3, "MeV": -3}

const unitsExpected = "GeV, TeV or MeV"

// parseScaled parses a number literal as scanned by scanNumber, multiplied
// by 10^shift. It reports false for a value that is not finite.
func parseScaled(lit string, shift int) (float64, bool) {
	mant, exp := lit, 0
	if k := strings.IndexAny(lit, "eE"); k >= 0 {
		e, err := strconv.Atoi(lit[k+1:])
		if err != nil {
			return 0, false
		}
		mant, exp = lit[:k], e
	}
	exp += shift
	if exp > 10000 || exp < -10000 {
		// Far outside float64; ParseFloat would agree, but keep the text short.
		if exp > 0 && strings.Trim(mant, "0.") != "" {
			return 0, false
		}
		return 0, true
	}
	v, err := strconv.ParseFloat(mant+"e"+strconv.Itoa(exp), 64)
	if err != nil {
		// Underflow to zero is harmless; overflow and bad syntax are not.
		return 0, v == 0 && errors.Is(err, strconv.ErrRange)
	}
	if math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, false
	}
	return v, true
}

// isNonFiniteWord reports whether a name spells NaN or infinity, so that
// "NaN GeV" gets an error about finiteness rather than about an unknown name.
func isNonFiniteWord(s string) bool {
	switch strings.ToLower(strings.TrimLeft(s, "+-.")) {
	case "nan", "inf", "infinity":
		return true
	}
	return false
}

// formatNumber prints a value in its canonical form: the shortest decimal
// that reads back to the same float64.
func formatNumber(v float64) string {
	if v == 0 {
		return "0" // also for -0
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// formatEnergy prints an energy in GeV in its canonical form.
func formatEnergy(v float64) string { return formatNumber(v) + " GeV" }
