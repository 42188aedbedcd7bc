package trigger

// Algorithm turns the towers of an event into one collection of objects
// (and possibly a few event-level scalars). Menus name algorithms through a
// Registry; adding one means writing a type with these two methods and a
// Factory, in a file of its own, and registering it.
//
// Run must be deterministic, must not modify its Input, and must keep any
// per-event working storage in out.Scratch, not in the Algorithm: one
// Algorithm value is shared by every goroutine of a Selector, each with its
// own Output.
type Algorithm interface {
	// Schema returns the fields of the objects and the scalars Run fills.
	// It must return the same value on every call.
	Schema() Schema
	// Run fills out.Objects (already reset) and out.Scalars (already
	// zeroed, one per Schema().Scalars) from in.
	Run(in *Input, out *Output)
}

// GridValidator is implemented by algorithms that work on the tower grid
// and need it to be well formed. NewSelector calls ValidateGrid once.
type GridValidator interface {
	ValidateGrid(g Grid) error
}

// Input is what an Algorithm sees of an event, after the tower selection of
// the FeatureConfig (noise cut, |eta| range, finite values).
type Input struct {
	// Event is the event as given to ComputeFeatures.
	Event *Event
	// Grid is the tower grid of the FeatureConfig.
	Grid Grid
	// Selected holds the indices in Event.Towers of the towers that pass
	// the tower selection, in input order.
	Selected []int32
	// Cells holds, per grid cell ieta*PhiBins+iphi, the summed E_T of both
	// layers of the selected towers on the grid. It has Grid.Cells()
	// entries.
	Cells []float64
	// Touched lists each cell of Cells that received a selected tower
	// once, in order of first arrival. Every other cell is zero.
	Touched []int32
}

// Output is where an Algorithm writes its results for one event.
type Output struct {
	// Objects receives the objects, one Add per object.
	Objects *Collection
	// Scalars has one entry per Schema().Scalars.
	Scalars []float64
	// Scratch belongs to the algorithm: it is kept from event to event
	// for one Features value and starts nil.
	Scratch any
}
