package trigger

// Kind is the physical kind of a number in the menu language. The type
// checker uses it to refuse comparing an energy with a pseudorapidity, or a
// threshold written without its unit.
type Kind uint8

const (
	// Number is a dimensionless quantity: a pseudorapidity, a count, a ratio.
	Number Kind = iota
	// Energy is an energy, momentum or mass, held in GeV.
	Energy
	// Angle is an azimuthal angle or angular difference, in radians. Plain
	// numbers compare with angles.
	Angle
)

// String names the kind as error messages use it.
func (k Kind) String() string {
	switch k {
	case Number:
		return "dimensionless number"
	case Energy:
		return "energy"
	case Angle:
		return "angle"
	}
	return "unknown kind"
}

// Field names one numeric value: a field of the objects of a collection or
// a scalar feature of the event.
type Field struct {
	Name string
	Kind Kind
}

// Schema is what an algorithm produces: the fields of each object of its
// collection, in order, and any event-level scalars (such as HT for a jet
// finder). Names follow the expression language: a lower-case letter, then
// lower-case letters, digits and '_'.
type Schema struct {
	Fields  []Field
	Scalars []Field
}
