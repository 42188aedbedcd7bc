package detector

import "fmt"

// Partition assigns calorimeter towers to readout sources. Source ids run
// from 1 to Sources(); a source covers a contiguous range of phi sectors on
// one eta side (both layers), so every source carries about the same number
// of channels. It is immutable and safe for concurrent use.
type Partition struct {
	geo     *Geometry
	sources int
	owner   []uint16 // tower index -> source id
}

// NewPartition splits g's towers over n sources; n must be between 1 and
// 2*PhiBins (one source per phi bin and side at the finest).
func NewPartition(g *Geometry, n int) (*Partition, error) {
	if n < 1 || n > 2*g.PhiBins {
		return nil, fmt.Errorf("detector: %d calorimeter sources, want 1..%d for %d phi bins", n, 2*g.PhiBins, g.PhiBins)
	}
	p := &Partition{geo: g, sources: n, owner: make([]uint16, g.Towers())}
	half := g.EtaBins / 2
	for t := range p.owner {
		_, ieta, iphi, _ := g.TowerCoords(t)
		side := 0
		if ieta >= half {
			side = 1
		}
		p.owner[t] = uint16((side*g.PhiBins+iphi)*n/(2*g.PhiBins) + 1)
	}
	return p, nil
}

// Sources returns the number of sources.
func (p *Partition) Sources() int { return p.sources }

// SourceIDs returns the source ids 1..Sources().
func (p *Partition) SourceIDs() []uint32 {
	ids := make([]uint32, p.sources)
	for i := range ids {
		ids[i] = uint32(i + 1)
	}
	return ids
}

// Owner returns the source reading out tower index t.
func (p *Partition) Owner(t int) uint32 { return uint32(p.owner[t]) }

// Geometry returns the geometry the partition was made for.
func (p *Partition) Geometry() *Geometry { return p.geo }
