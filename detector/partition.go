package detector

import (
	"fmt"
	"math"
)

// maxMuonSources bounds the number of muon sectors a description may ask for.
const maxMuonSources = 256

// SourceKind says what a readout source reads out.
type SourceKind uint8

// Source kinds. SourceUnknown is what Partition.Kind returns for an id the
// partition does not have.
const (
	SourceUnknown SourceKind = iota
	SourceCalo
	SourceMuon
)

// String returns "calo", "muon" or "unknown".
func (k SourceKind) String() string {
	switch k {
	case SourceCalo:
		return "calo"
	case SourceMuon:
		return "muon"
	}
	return "unknown"
}

// Partition assigns calorimeter towers and muon-station hits to readout
// sources. Calorimeter source ids run from 1 to CaloSources(): a source
// covers a contiguous range of phi sectors on one eta side (both layers), so
// every source carries about the same number of channels. Muon source ids
// follow, CaloSources()+1 .. CaloSources()+MuonSources(): muon source k
// (counting from 0, its "position") reads the hits of all stations with
// azimuth in [-pi + 2pi k/M, -pi + 2pi (k+1)/M). It is immutable and safe
// for concurrent use.
type Partition struct {
	geo     *Geometry
	sources int      // calorimeter sources
	muons   int      // muon sources
	owner   []uint16 // tower index -> source id
}

// NewPartition splits g's towers over n calorimeter sources and adds the
// muon sources of g's description (Geometry.MuonSources). n must be between
// 1 and 2*PhiBins (one source per phi bin and side at the finest).
func NewPartition(g *Geometry, n int) (*Partition, error) {
	return NewPartitionWithMuons(g, n, g.MuonSources)
}

// NewPartitionWithMuons is NewPartition with the number of muon sources
// given explicitly: 0..256.
func NewPartitionWithMuons(g *Geometry, calo, muon int) (*Partition, error) {
	if calo < 1 || calo > 2*g.PhiBins {
		return nil, fmt.Errorf("detector: %d calorimeter sources, want 1..%d for %d phi bins", calo, 2*g.PhiBins, g.PhiBins)
	}
	if muon < 0 || muon > maxMuonSources {
		return nil, fmt.Errorf("detector: %d muon sources, want 0..%d", muon, maxMuonSources)
	}
	p := &Partition{geo: g, sources: calo, muons: muon, owner: make([]uint16, g.Towers())}
	half := g.EtaBins / 2
	for t := range p.owner {
		_, ieta, iphi, _ := g.TowerCoords(t)
		side := 0
		if ieta >= half {
			side = 1
		}
		p.owner[t] = uint16((side*g.PhiBins+iphi)*calo/(2*g.PhiBins) + 1)
	}
	return p, nil
}

// Sources returns the number of calorimeter sources, whose ids are
// 1..Sources(). It is CaloSources under its original name.
func (p *Partition) Sources() int { return p.sources }

// CaloSources returns the number of calorimeter sources.
func (p *Partition) CaloSources() int { return p.sources }

// MuonSources returns the number of muon sources.
func (p *Partition) MuonSources() int { return p.muons }

// AllSources returns the number of sources of both kinds.
func (p *Partition) AllSources() int { return p.sources + p.muons }

// SourceIDs returns the calorimeter source ids 1..Sources().
func (p *Partition) SourceIDs() []uint32 { return idRange(1, p.sources) }

// MuonSourceIDs returns the muon source ids in position order.
func (p *Partition) MuonSourceIDs() []uint32 { return idRange(p.sources+1, p.muons) }

// AllSourceIDs returns every source id, calorimeter then muon:
// 1..AllSources().
func (p *Partition) AllSourceIDs() []uint32 { return idRange(1, p.sources+p.muons) }

func idRange(first, n int) []uint32 {
	ids := make([]uint32, n)
	for i := range ids {
		ids[i] = uint32(first + i)
	}
	return ids
}

// Kind returns the kind of source id, or SourceUnknown.
func (p *Partition) Kind(id uint32) SourceKind {
	switch {
	case id >= 1 && id <= uint32(p.sources):
		return SourceCalo
	case id > uint32(p.sources) && id <= uint32(p.sources+p.muons):
		return SourceMuon
	}
	return SourceUnknown
}

// MuonSourceID returns the id of the muon source at position k; it panics
// if k is not in 0..MuonSources()-1.
func (p *Partition) MuonSourceID(k int) uint32 {
	if k < 0 || k >= p.muons {
		panic(fmt.Sprintf("detector: muon source position %d out of range 0..%d", k, p.muons-1))
	}
	return uint32(p.sources + 1 + k)
}

// MuonPosition returns the position of muon source id; ok is false if id
// is not a muon source.
func (p *Partition) MuonPosition(id uint32) (k int, ok bool) {
	if p.Kind(id) != SourceMuon {
		return 0, false
	}
	return int(id) - p.sources - 1, true
}

// MuonSector returns the position of the muon source reading azimuth phi
// (any finite angle); it panics if there are no muon sources.
func (p *Partition) MuonSector(phi float64) int {
	if p.muons == 0 {
		panic("detector: partition has no muon sources")
	}
	u := math.Mod(phi+math.Pi, 2*math.Pi)
	if u < 0 {
		u += 2 * math.Pi
	}
	k := int(u / (2 * math.Pi) * float64(p.muons))
	return min(k, p.muons-1)
}

// Owner returns the calorimeter source reading out tower index t.
func (p *Partition) Owner(t int) uint32 { return uint32(p.owner[t]) }

// Geometry returns the geometry the partition was made for.
func (p *Partition) Geometry() *Geometry { return p.geo }
