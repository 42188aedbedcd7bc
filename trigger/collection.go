package trigger

import "fmt"

// Collection is a list of objects of one kind (jets, clusters, muon
// candidates), each a fixed row of named numeric fields. Rows are stored
// flat so that a Collection reused across events does not allocate once it
// has grown to the largest event seen.
//
// A Collection is not safe for concurrent use; each Features value owns
// its collections.
type Collection struct {
	name   string
	fields []Field
	vals   []float64
}

// NewCollection returns an empty collection with the given fields.
func NewCollection(name string, fields []Field) *Collection {
	return &Collection{name: name, fields: fields}
}

// Name returns the collection's name as menus use it (for example "jets").
func (c *Collection) Name() string { return c.name }

// Fields returns the fields of every object, in row order. The slice must
// not be modified.
func (c *Collection) Fields() []Field { return c.fields }

// Len returns the number of objects.
func (c *Collection) Len() int {
	if len(c.fields) == 0 {
		return 0
	}
	return len(c.vals) / len(c.fields)
}

// At returns field f of object i. It panics if i or f is out of range.
func (c *Collection) At(i, f int) float64 {
	if f < 0 || f >= len(c.fields) {
		panic(fmt.Sprintf("trigger: field %d of collection %q with %d fields", f, c.name, len(c.fields)))
	}
	return c.vals[i*len(c.fields)+f]
}

// Value returns the field called name of object i, and false if there is
// no such field or object. It is meant for tools and tests; expressions use
// field indices resolved at load time.
func (c *Collection) Value(i int, name string) (float64, bool) {
	f := c.FieldIndex(name)
	if f < 0 || i < 0 || i >= c.Len() {
		return 0, false
	}
	return c.vals[i*len(c.fields)+f], true
}

// FieldIndex returns the index of the field called name, or -1.
func (c *Collection) FieldIndex(name string) int {
	for i, f := range c.fields {
		if f.Name == name {
			return i
		}
	}
	return -1
}

// Add appends one object. It panics unless len(vals) equals the number of
// fields.
func (c *Collection) Add(vals ...float64) {
	if len(vals) != len(c.fields) {
		panic(fmt.Sprintf("trigger: %d values for collection %q with %d fields", len(vals), c.name, len(c.fields)))
	}
	c.vals = append(c.vals, vals...)
}

// Reset removes all objects and keeps the storage.
func (c *Collection) Reset() { c.vals = c.vals[:0] }
