package replay

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/bunchsieve/bunchsieve/trigger"
)

// Quantity names one number computed from an event's features: a scalar
// (met, met_phi, sumet, ht, or any scalar a menu's algorithms give), a
// field of the object at an index of a collection (jets[0].et), or the
// size of a collection (count(jets)). Make one with ParseQuantity. It is
// immutable and safe for concurrent use.
type Quantity struct {
	text  string
	kind  quantityKind
	name  string // scalar or collection
	index int
	field string
}

type quantityKind uint8

const (
	quantityScalar quantityKind = iota
	quantityField
	quantityCount
)

// ParseQuantity parses text as a Quantity. It checks the syntax only;
// Check says whether a menu's features have it.
func ParseQuantity(text string) (Quantity, error) {
	q := Quantity{text: text}
	s := strings.TrimSpace(text)
	switch {
	case strings.HasPrefix(s, "count(") && strings.HasSuffix(s, ")"):
		q.kind, q.name = quantityCount, strings.TrimSpace(s[len("count("):len(s)-1])
		if !isIdent(q.name) {
			return q, fmt.Errorf("replay: quantity %q: want count(COLLECTION)", text)
		}
	case strings.Contains(s, "["):
		open, close := strings.IndexByte(s, '['), strings.IndexByte(s, ']')
		if close < open || !strings.HasPrefix(s[close+1:], ".") {
			return q, fmt.Errorf("replay: quantity %q: want COLLECTION[INDEX].FIELD, such as jets[0].et", text)
		}
		idx, err := strconv.Atoi(s[open+1 : close])
		if err != nil || idx < 0 {
			return q, fmt.Errorf("replay: quantity %q: index %q is not a whole number >= 0", text, s[open+1:close])
		}
		q.kind, q.name, q.index, q.field = quantityField, s[:open], idx, s[close+2:]
		if !isIdent(q.name) || !isIdent(q.field) {
			return q, fmt.Errorf("replay: quantity %q: want COLLECTION[INDEX].FIELD, such as jets[0].et", text)
		}
	default:
		q.name = s
		if !isIdent(s) {
			return q, fmt.Errorf("replay: quantity %q: want a scalar name (met, sumet, ht), COLLECTION[INDEX].FIELD or count(COLLECTION)", text)
		}
	}
	return q, nil
}

func isIdent(s string) bool {
	if s == "" {
		return false
	}
	for i, c := range s {
		switch {
		case c >= 'a' && c <= 'z', c == '_', c >= 'A' && c <= 'Z':
		case c >= '0' && c <= '9' && i > 0:
		default:
			return false
		}
	}
	return true
}

// String returns the text the quantity was parsed from.
func (q Quantity) String() string { return q.text }

// Eval returns the quantity's value in f, or NaN where the event has none
// (an index past the end of the collection). It returns NaN too for a
// quantity the features do not have; Check finds those before a run.
func (q Quantity) Eval(f *trigger.Features) float64 {
	switch q.kind {
	case quantityScalar:
		if v, ok := f.Scalar(q.name); ok {
			return v
		}
	case quantityCount:
		if c := f.Collection(q.name); c != nil {
			return float64(c.Len())
		}
	case quantityField:
		if c := f.Collection(q.name); c != nil && q.index < c.Len() {
			if v, ok := c.Value(q.index, q.field); ok {
				return v
			}
		}
	}
	return math.NaN()
}

// Check reports whether features computed for menu m have the quantity,
// naming what exists when they do not.
func (q Quantity) Check(m *trigger.Menu) error {
	var f trigger.Features
	trigger.ComputeFeatures(&trigger.Event{}, m.Features, &f)
	switch q.kind {
	case quantityScalar:
		if _, ok := f.Scalar(q.name); !ok {
			return fmt.Errorf("replay: menu %s has no scalar %q (it has %s)", m.Name, q.name, strings.Join(scalarNames(m), ", "))
		}
	case quantityCount, quantityField:
		c := f.Collection(q.name)
		if c == nil {
			return fmt.Errorf("replay: menu %s has no collection %q (it has %s)", m.Name, q.name, strings.Join(collectionNames(m), ", "))
		}
		if q.kind == quantityField && c.FieldIndex(q.field) < 0 {
			var names []string
			for _, fd := range c.Fields() {
				names = append(names, fd.Name)
			}
			return fmt.Errorf("replay: collection %q has no field %q (it has %s)", q.name, q.field, strings.Join(names, ", "))
		}
	}
	return nil
}

func scalarNames(m *trigger.Menu) []string {
	names := []string{"met", "met_phi", "sumet"}
	for _, cc := range m.Features.Collections {
		for _, s := range cc.Algorithm.Schema().Scalars {
			names = append(names, s.Name)
		}
	}
	return names
}

func collectionNames(m *trigger.Menu) []string {
	var names []string
	for _, cc := range m.Features.Collections {
		names = append(names, cc.Name)
	}
	if len(names) == 0 {
		return []string{"none"}
	}
	return names
}
