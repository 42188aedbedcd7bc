package trigger

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"os"
	"strings"
	"unicode/utf8"
)

// BaseSet is the name of the prescale set that every menu has: the rules'
// own prescales, with no overrides. No prescale set of a menu may use it.
const BaseSet = "base"

// Menu is a parsed, checked menu. Every condition is compiled when the
// menu is parsed. A Menu is immutable and safe for concurrent use; do not
// modify its fields.
type Menu struct {
	// Name is the menu's name (the menu key).
	Name string
	// Version is the language version, 1.
	Version int
	// Hash identifies the meaning of the menu: the first 16 hex digits of
	// the SHA-256 of Canonical(). The name is not part of it.
	Hash string
	// File is the file name the menu was parsed as.
	File string
	// Features is the feature configuration, without a grid: NewSelector
	// adds one.
	Features FeatureConfig
	// Rules are the rules in menu order.
	Rules []RuleSpec
	// Streams are the streams in menu order.
	Streams []StreamSpec
	// PrescaleSets are the named prescale sets in menu order, not
	// counting BaseSet.
	PrescaleSets []PrescaleSet
	// ActiveSet is the prescale set in force when a Selector starts: the
	// active_set key, or else the first prescale set, or else BaseSet.
	ActiveSet string

	sch       *schema
	canonical string
	features  []string // canonical text of each feature block, for Describe
}

// RuleSpec is one rule of a menu.
type RuleSpec struct {
	// Name is the rule's name.
	Name string
	// When is the canonical text of the condition, or "" for a
	// pass-through rule.
	When string
	// Prescale is the rule's own prescale (>= 1), used by BaseSet and by
	// every set that does not name the rule.
	Prescale int
	// KeepFraction is the keep_fraction of a pass-through rule, or 0.
	KeepFraction float64
	// Disabled rules are never evaluated: they never pass.
	Disabled bool
	// Line and Col locate the rule's name in the menu file.
	Line, Col int

	cond boolFn // nil for pass-through rules
}

// PassThrough reports whether every event passes the rule (a keep_fraction
// rule).
func (r *RuleSpec) PassThrough() bool { return r.cond == nil }

// StreamSpec is one output stream: the events kept by any of its rules go
// to it.
type StreamSpec struct {
	Name  string
	Rules []string
}

// PrescaleSet is a named set of prescale overrides. Prescales maps a rule
// name to its prescale in this set, 0 meaning off; rules not in the map keep
// their own prescale.
type PrescaleSet struct {
	Name      string
	Prescales map[string]int
}

// ParseMenu parses and checks a menu written in version 1 of the menu
// language, with the algorithms of StandardRegistry. file names the menu in
// errors. A bad menu gives a *MenuError pointing at the offending token.
func ParseMenu(file string, data []byte) (*Menu, error) {
	return ParseMenuWith(file, data, StandardRegistry())
}

// LoadMenu reads and parses the menu file at path.
func LoadMenu(path string) (*Menu, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("trigger: read menu: %w", err)
	}
	return ParseMenu(path, data)
}

// RuleIndex returns the index of the rule called name, or -1.
func (m *Menu) RuleIndex(name string) int {
	for i := range m.Rules {
		if m.Rules[i].Name == name {
			return i
		}
	}
	return -1
}

// SetNames returns BaseSet followed by the names of the prescale sets.
func (m *Menu) SetNames() []string {
	names := []string{BaseSet}
	for _, s := range m.PrescaleSets {
		names = append(names, s.Name)
	}
	return names
}

// clipName shortens a name to quote in an error: a name sent from outside
// may be any length, and is echoed into logs.
func clipName(s string) string {
	const most = 64
	if len(s) <= most {
		return s
	}
	cut := most
	for cut > 0 && !utf8.RuneStart(s[cut]) {
		cut--
	}
	return s[:cut] + fmt.Sprintf("... (%d bytes)", len(s))
}

// Prescales returns the prescale of every rule, in menu order, under the
// named set: 0 means off. Disabled rules get 0 too.
func (m *Menu) Prescales(set string) ([]int, error) {
	var ps *PrescaleSet
	if set != BaseSet {
		for i := range m.PrescaleSets {
			if m.PrescaleSets[i].Name == set {
				ps = &m.PrescaleSets[i]
			}
		}
		if ps == nil {
			return nil, fmt.Errorf("%w %q (the menu has %s)", ErrUnknownPrescaleSet, clipName(set), strings.Join(m.SetNames(), ", "))
		}
	}
	out := make([]int, len(m.Rules))
	for i, r := range m.Rules {
		out[i] = r.Prescale
		if ps != nil {
			if p, ok := ps.Prescales[r.Name]; ok {
				out[i] = p
			}
		}
		if r.Disabled {
			out[i] = 0
		}
	}
	return out, nil
}

// Canonical returns the canonical text of the menu's meaning, from which
// Hash is computed: the feature settings with every default filled in,
// each rule in order with its canonical condition, the effective prescale
// of every rule under every set, the active set, and the streams. Energies
// are printed in GeV with the shortest exact decimal, so that layout,
// quoting, comments and units do not change it.
func (m *Menu) Canonical() string { return m.canonical }

func (m *Menu) computeCanonical() {
	var b strings.Builder
	fmt.Fprintf(&b, "bunchsieve menu language %d\n", m.Version)
	for _, f := range m.features {
		b.WriteString(f)
		b.WriteByte('\n')
	}
	for _, r := range m.Rules {
		fmt.Fprintf(&b, "rule %s prescale=%d", r.Name, r.Prescale)
		if r.Disabled {
			b.WriteString(" disabled")
		}
		if r.PassThrough() {
			b.WriteString(" pass-through\n")
		} else {
			fmt.Fprintf(&b, " when=%s\n", r.When)
		}
	}
	// Sets are listed by name: their order in the file means nothing once
	// the active set is written out.
	names := m.SetNames()
	sortedSets := append([]string{names[0]}, sortedCopy(names[1:])...)
	for _, s := range sortedSets {
		ps, _ := m.Prescales(s)
		fmt.Fprintf(&b, "set %s", s)
		for i, r := range m.Rules {
			fmt.Fprintf(&b, " %s=%d", r.Name, ps[i])
		}
		b.WriteByte('\n')
	}
	fmt.Fprintf(&b, "active %s\n", m.ActiveSet)
	for _, s := range m.Streams {
		fmt.Fprintf(&b, "stream %s", s.Name)
		// Rules of a stream in menu order: their order in the list means
		// nothing.
		for _, r := range m.Rules {
			for _, n := range s.Rules {
				if n == r.Name {
					fmt.Fprintf(&b, " %s", n)
				}
			}
		}
		b.WriteByte('\n')
	}
	m.canonical = b.String()
	sum := sha256.Sum256([]byte(m.canonical))
	m.Hash = hex.EncodeToString(sum[:8])
}
