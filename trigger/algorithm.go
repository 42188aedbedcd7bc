package trigger

// Algorithm turns the towers (or muon hits) of an event into one
// collection of objects (and possibly a few event-level scalars). Menus name
// algorithms through a Registry; adding one means writing a type with these
// two methods and a Factory, in a file of its own, and registering it
// (docs/menu.md, "Adding a finder").
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

// CellReader is implemented by algorithms that read the grid cells and can
// say which of them they need, so that ComputeFeatures prepares Input.Hot
// and the per-layer cells only when some algorithm uses them.
type CellReader interface {
	CellNeeds() CellNeeds
}

// CellNeeds says what an algorithm reads of the cells beyond Input.Cells
// and Input.Touched. The zero value asks for nothing more.
type CellNeeds struct {
	// Hot: the algorithm reads Input.Hot and needs in it every cell whose
	// summed E_T is at least MinET (GeV).
	Hot   bool
	MinET float64
	// Layers: the algorithm reads Input.EMCells (and Input.Had).
	Layers bool
}

// Input is what an Algorithm sees of an event, after the tower selection of
// the FeatureConfig (noise cut, |eta| range, finite values).
type Input struct {
	// Event is the event as given to ComputeFeatures. Its muon hits go to
	// the algorithms as they are: the tower selection does not touch them.
	Event *Event
	// Grid is the tower grid, and the solenoid field, of the
	// FeatureConfig.
	Grid Grid
	// Selected holds the indices of the towers that pass the tower
	// selection, in input order: Event.TowerAt(i, Grid) is tower i.
	Selected []int32
	// Cells holds, per grid cell ieta*PhiBins+iphi, the summed E_T of both
	// layers of the selected towers on the grid. It has Grid.Cells()
	// entries.
	Cells []float64
	// Touched lists each cell of Cells that received a selected tower
	// once, in order of first arrival. Every other cell is zero.
	Touched []int32
	// Hot lists each cell of Cells whose E_T reached HotCut once, in the
	// order in which they reached it; every cell not in Hot holds less than
	// HotCut. Hot is filled only when some algorithm of the configuration
	// asks for it (CellNeeds.Hot), and HotCut is then the lowest MinET
	// asked for; otherwise Hot is empty and HotCut is +Inf.
	Hot    []int32
	HotCut float64
	// EMCells holds, per cell, the E_T of the selected towers of layer 0,
	// the electromagnetic layer; Had gives the rest. It is filled only when
	// some algorithm asks for it (CellNeeds.Layers) and is nil otherwise.
	// Only the cells in Touched can be non-zero.
	EMCells []float64
}

// Had returns the hadronic E_T of cell c: that of the selected towers of
// every layer but 0, as Cells[c] - EMCells[c] (never below zero; exact
// when the cell has towers of one kind only). It panics if EMCells was not
// filled or c is out of range.
func (in *Input) Had(c int) float64 {
	return max(in.Cells[c]-in.EMCells[c], 0)
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
