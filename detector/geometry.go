// Package detector describes the detector and the machine that the readout
// emulators and the selection share: the calorimeter tower grid and its
// channel map, the partition of channels into readout sources, the bunch
// clock and filling scheme, and the crossing generator.
package detector

import (
	_ "embed"
	"fmt"
	"math"
	"os"
	"strings"

	"go.yaml.in/yaml/v3"
)

// Layer numbers of the calorimeter.
const (
	LayerEM  = 0 // electromagnetic
	LayerHad = 1 // hadronic
	Layers   = 2
)

//go:embed lantern.yaml
var lanternYAML []byte

// Config is the detector and machine description read from YAML.
type Config struct {
	Name   string  `yaml:"name"`
	FieldT float64 `yaml:"field_t"`
	Calo   struct {
		EtaMax        float64 `yaml:"eta_max"`
		EtaStep       float64 `yaml:"eta_step"`
		PhiBins       int     `yaml:"phi_bins"`
		LeastCountGeV float64 `yaml:"least_count_gev"`
		MaxCount      uint32  `yaml:"max_count"`
	} `yaml:"calorimeter"`
	Readout struct {
		CaloSources int `yaml:"calo_sources"`
	} `yaml:"readout"`
	Filling         FillingConfig `yaml:"filling"`
	LumiSliceOrbits uint64        `yaml:"lumi_slice_orbits"`
}

// Geometry is the calorimeter tower grid with precomputed tower centres. It
// is immutable after construction and safe for concurrent use.
type Geometry struct {
	Name          string
	FieldT        float64
	EtaMax        float64
	EtaStep       float64
	EtaBins       int
	PhiBins       int
	LeastCountGeV float64
	MaxCount      uint32

	etaCentre []float64
	coshEta   []float64
}

// Lantern returns the geometry of the invented default detector.
func Lantern() *Geometry {
	d, err := ParseDescription("lantern.yaml", lanternYAML)
	if err != nil {
		panic("detector: built-in description is invalid: " + err.Error())
	}
	return d.Geometry
}

// Description is a whole parsed detector file: geometry, filling scheme and
// lumi-slice length.
type Description struct {
	Config   Config
	Geometry *Geometry
	Filling  *FillingScheme
}

// DefaultDescription returns the built-in Lantern/Meridian description.
func DefaultDescription() *Description {
	d, err := ParseDescription("lantern.yaml", lanternYAML)
	if err != nil {
		panic("detector: built-in description is invalid: " + err.Error())
	}
	return d
}

// LoadDescription reads a detector description file.
func LoadDescription(path string) (*Description, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("detector: %w", err)
	}
	return ParseDescription(path, data)
}

// ParseDescription parses and validates a detector description; file names
// the input in errors.
func ParseDescription(file string, data []byte) (*Description, error) {
	var c Config
	dec := yaml.NewDecoder(strings.NewReader(string(data)))
	dec.KnownFields(true)
	if err := dec.Decode(&c); err != nil {
		return nil, fmt.Errorf("detector: %s: %v", file, err)
	}
	g, err := NewGeometry(c)
	if err != nil {
		return nil, fmt.Errorf("detector: %s: %v", file, err)
	}
	fs, err := NewFillingScheme(c.Filling)
	if err != nil {
		return nil, fmt.Errorf("detector: %s: %v", file, err)
	}
	if c.LumiSliceOrbits == 0 {
		return nil, fmt.Errorf("detector: %s: lumi_slice_orbits must be > 0", file)
	}
	return &Description{Config: c, Geometry: g, Filling: fs}, nil
}

// NewGeometry validates c and builds the tower grid.
func NewGeometry(c Config) (*Geometry, error) {
	k := c.Calo
	switch {
	case !(k.EtaMax > 0) || math.IsInf(k.EtaMax, 0):
		return nil, fmt.Errorf("calorimeter.eta_max = %v, want a finite value > 0", k.EtaMax)
	case !(k.EtaStep > 0) || k.EtaStep > k.EtaMax:
		return nil, fmt.Errorf("calorimeter.eta_step = %v, want 0 < step <= eta_max", k.EtaStep)
	case k.PhiBins < 4 || k.PhiBins > 1024:
		return nil, fmt.Errorf("calorimeter.phi_bins = %d, want 4..1024", k.PhiBins)
	case !(k.LeastCountGeV > 0):
		return nil, fmt.Errorf("calorimeter.least_count_gev = %v, want > 0", k.LeastCountGeV)
	case k.MaxCount == 0:
		return nil, fmt.Errorf("calorimeter.max_count must be > 0")
	case !(c.FieldT > 0):
		return nil, fmt.Errorf("field_t = %v, want > 0", c.FieldT)
	}
	nEta := 2 * k.EtaMax / k.EtaStep
	if math.Abs(nEta-math.Round(nEta)) > 1e-6 {
		return nil, fmt.Errorf("calorimeter.eta_step = %v does not divide 2*eta_max = %v", k.EtaStep, 2*k.EtaMax)
	}
	g := &Geometry{
		Name: c.Name, FieldT: c.FieldT, EtaMax: k.EtaMax, EtaStep: k.EtaStep,
		EtaBins: int(math.Round(nEta)), PhiBins: k.PhiBins,
		LeastCountGeV: k.LeastCountGeV, MaxCount: k.MaxCount,
	}
	g.etaCentre = make([]float64, g.EtaBins)
	g.coshEta = make([]float64, g.EtaBins)
	for i := range g.etaCentre {
		g.etaCentre[i] = -g.EtaMax + (float64(i)+0.5)*g.EtaStep
		g.coshEta[i] = math.Cosh(g.etaCentre[i])
	}
	return g, nil
}

// Towers returns the number of towers over both layers.
func (g *Geometry) Towers() int { return Layers * g.EtaBins * g.PhiBins }

// TowerIndex returns the global index of tower (layer, ieta, iphi). It panics
// if an argument is out of range.
func (g *Geometry) TowerIndex(layer, ieta, iphi int) int {
	if layer < 0 || layer >= Layers || ieta < 0 || ieta >= g.EtaBins || iphi < 0 || iphi >= g.PhiBins {
		panic(fmt.Sprintf("detector: tower (%d,%d,%d) out of range", layer, ieta, iphi))
	}
	return (layer*g.EtaBins+ieta)*g.PhiBins + iphi
}

// TowerCoords is the inverse of TowerIndex; ok is false for an index outside
// the grid.
func (g *Geometry) TowerCoords(index int) (layer, ieta, iphi int, ok bool) {
	if index < 0 || index >= g.Towers() {
		return 0, 0, 0, false
	}
	iphi = index % g.PhiBins
	rest := index / g.PhiBins
	return rest / g.EtaBins, rest % g.EtaBins, iphi, true
}

// EtaCentre returns the pseudorapidity at the centre of eta bin ieta.
func (g *Geometry) EtaCentre(ieta int) float64 { return g.etaCentre[ieta] }

// CoshEta returns cosh of EtaCentre(ieta).
func (g *Geometry) CoshEta(ieta int) float64 { return g.coshEta[ieta] }

// PhiCentre returns the azimuth at the centre of phi bin iphi, in (-pi, pi).
func (g *Geometry) PhiCentre(iphi int) float64 {
	return -math.Pi + (float64(iphi)+0.5)*2*math.Pi/float64(g.PhiBins)
}

// Locate returns the bin containing (eta, phi); ok is false outside the
// acceptance |eta| < EtaMax. phi may be any finite angle.
func (g *Geometry) Locate(eta, phi float64) (ieta, iphi int, ok bool) {
	if !(math.Abs(eta) < g.EtaMax) {
		return 0, 0, false
	}
	ieta = int((eta + g.EtaMax) / g.EtaStep)
	if ieta >= g.EtaBins {
		ieta = g.EtaBins - 1
	}
	p := math.Mod(phi+math.Pi, 2*math.Pi)
	if p < 0 {
		p += 2 * math.Pi
	}
	iphi = int(p / (2 * math.Pi) * float64(g.PhiBins))
	if iphi >= g.PhiBins {
		iphi = g.PhiBins - 1
	}
	return ieta, iphi, true
}

// Counts converts a transverse energy in GeV to integer least counts,
// rounding down, and reports whether it saturated at MaxCount.
func (g *Geometry) Counts(etGeV float64) (n uint32, saturated bool) {
	if !(etGeV > 0) {
		return 0, false
	}
	c := etGeV / g.LeastCountGeV
	if c >= float64(g.MaxCount) {
		return g.MaxCount, true
	}
	return uint32(c), false
}

// ET converts least counts back to GeV.
func (g *Geometry) ET(counts uint32) float64 { return float64(counts) * g.LeastCountGeV }

// TransverseEnergy returns E_T = E / cosh(eta) = E sin(theta) for a massless
// deposit of energy e at pseudorapidity eta (PDG review "Kinematics").
func TransverseEnergy(e, eta float64) float64 { return e / math.Cosh(eta) }

// Theta returns the polar angle of pseudorapidity eta: eta = -ln tan(theta/2).
func Theta(eta float64) float64 { return 2 * math.Atan(math.Exp(-eta)) }
