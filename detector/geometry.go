// Package detector describes the detector and the machine that the readout
// emulators and the selection share: the calorimeter tower grid and its
// channel map, the muon stations, the partition of channels into readout
// sources, the bunch clock and filling scheme, and the crossing generators
// (a toy one, a physics generator with detector response, and a reader of
// HepMC generator files). docs/physics-model.md states the physics model
// and where each of its numbers comes from.
package detector

import (
	_ "embed"
	"fmt"
	"math"
	"os"
	"slices"
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
	Name string `yaml:"name"`
	// FieldT is the solenoid field in tesla along +z. The invented Lantern
	// takes it uniform out to the last muon station (see MuonConfig).
	FieldT          float64       `yaml:"field_t"`
	Calo            CaloConfig    `yaml:"calorimeter"`
	Muon            MuonConfig    `yaml:"muon"`
	Readout         ReadoutConfig `yaml:"readout"`
	Filling         FillingConfig `yaml:"filling"`
	LumiSliceOrbits uint64        `yaml:"lumi_slice_orbits"`
}

// CaloConfig is the calorimeter section of a description: the tower grid,
// the digitisation and the response of each layer.
type CaloConfig struct {
	EtaMax        float64 `yaml:"eta_max"`
	EtaStep       float64 `yaml:"eta_step"`
	PhiBins       int     `yaml:"phi_bins"`
	LeastCountGeV float64 `yaml:"least_count_gev"`
	MaxCount      uint32  `yaml:"max_count"`
	// InnerRadiusM is the radius of the barrel front face in m, where
	// charged particles stop bending; zero means 1.5 m.
	InnerRadiusM float64 `yaml:"inner_radius_m"`
	// EndcapZM is |z| of the endcap front faces in m; zero means 3.6 m.
	EndcapZM float64 `yaml:"endcap_z_m"`
	// ZeroSuppressionCounts is the smallest count a tower is read out
	// with; zero means 1 (every non-zero count is sent).
	ZeroSuppressionCounts uint32 `yaml:"zero_suppression_counts"`
	// EM and Had are the responses of the two layers.
	EM  LayerResponse `yaml:"em"`
	Had LayerResponse `yaml:"had"`
}

// LayerResponse is the energy response of one calorimeter layer, in the
// form sigma/E = a/sqrt(E) (+) b/E (+) c (PDG review "Particle detectors at
// accelerators", calorimetry). The stochastic and constant terms smear each
// shower; the noise term b is not drawn per shower but comes from the
// electronic noise of every tower the shower covers, b = NoiseGeV*sqrt(N)
// for an N-tower cluster, so it is never counted twice.
type LayerResponse struct {
	// Stochastic is a, for E in GeV; zero means no stochastic term.
	Stochastic float64 `yaml:"stochastic"`
	// Constant is c; zero means no constant term.
	Constant float64 `yaml:"constant"`
	// NoiseGeV is the Gaussian rms of the electronic noise of one tower,
	// in energy (not E_T); zero means no noise.
	NoiseGeV float64 `yaml:"noise_gev"`
	// Spread is the rms of the lateral shower profile in units of eta
	// (and radians of phi); zero puts a whole shower into one tower.
	Spread float64 `yaml:"spread"`
}

// Resolution returns sigma/E of a shower of energy e GeV read out over n
// towers: a/sqrt(E) (+) NoiseGeV*sqrt(n)/E (+) c, in quadrature.
func (l LayerResponse) Resolution(e float64, n int) float64 {
	b := l.NoiseGeV * math.Sqrt(float64(n))
	return math.Sqrt(l.Stochastic*l.Stochastic/e + b*b/(e*e) + l.Constant*l.Constant)
}

// MuonConfig is the muon system: barrel cylinders at fixed radii covering
// |eta| < EtaMax. The invented Lantern takes the solenoid field uniform out
// to the last station, so muons bend along their whole path (a real return
// yoke reverses the field outside the solenoid).
type MuonConfig struct {
	// EtaMax is the acceptance of every station in the pseudorapidity of
	// the hit position; it must be > 0 when there are stations.
	EtaMax float64 `yaml:"eta_max"`
	// MinMomentumGeV is the momentum a muon needs to cross the calorimeter
	// and reach the stations; zero means every muon gets through.
	MinMomentumGeV float64 `yaml:"min_momentum_gev"`
	// Stations lists the stations by increasing radius; empty means no
	// muon system.
	Stations []MuonStation `yaml:"stations"`
}

// MuonStation is one barrel muon station.
type MuonStation struct {
	// RadiusM is the station radius in m; it must lie outside the
	// calorimeter front face.
	RadiusM float64 `yaml:"radius_m"`
	// RPhiResolutionMm is the Gaussian rms of a hit along the station in
	// the transverse plane, mm; zero means exact.
	RPhiResolutionMm float64 `yaml:"rphi_resolution_mm"`
	// ZResolutionMm is the Gaussian rms of a hit along z, mm; zero means
	// exact.
	ZResolutionMm float64 `yaml:"z_resolution_mm"`
}

// ReadoutConfig is the split into readout sources and their clocks.
type ReadoutConfig struct {
	// CaloSources is the default number of calorimeter sources (a run
	// may choose another number).
	CaloSources int `yaml:"calo_sources"`
	// MuonSources is the number of muon sources, one per phi sector of
	// equal width; zero means no muon sources.
	MuonSources int `yaml:"muon_sources"`
	// ClockOffsetMaxNs bounds each source's fixed clock offset: every
	// source gets one offset drawn uniformly in +-ClockOffsetMaxNs per
	// generator seed; zero means no offsets.
	ClockOffsetMaxNs float64 `yaml:"clock_offset_max_ns"`
	// ClockJitterNs is the Gaussian rms of each source's timestamp jitter
	// from crossing to crossing; zero means none.
	ClockJitterNs float64 `yaml:"clock_jitter_ns"`
}

// Geometry is the calorimeter tower grid with precomputed tower centres,
// the calorimeter response, the muon stations and the field. It is
// immutable after construction (callers must not modify the slices it
// exposes) and safe for concurrent use.
type Geometry struct {
	Name          string
	FieldT        float64
	EtaMax        float64
	EtaStep       float64
	EtaBins       int
	PhiBins       int
	LeastCountGeV float64
	MaxCount      uint32

	// InnerRadiusM and EndcapZM place the calorimeter front faces (m).
	InnerRadiusM float64
	EndcapZM     float64
	// ZeroSuppressionCounts is the smallest count read out (>= 1).
	ZeroSuppressionCounts uint32
	// EM and Had are the layer responses.
	EM, Had LayerResponse

	// MuonEtaMax is the muon-station acceptance; MuonMinMomentumGeV the
	// momentum a muon needs to reach the stations.
	MuonEtaMax         float64
	MuonMinMomentumGeV float64
	// MuonStations lists the stations by increasing radius.
	MuonStations []MuonStation
	// MuonSources is the configured number of muon readout sources.
	MuonSources int

	etaCentre []float64
	coshEta   []float64
}

// Layer returns the response of layer LayerEM or LayerHad; it panics for
// another layer.
func (g *Geometry) Layer(layer int) LayerResponse {
	switch layer {
	case LayerEM:
		return g.EM
	case LayerHad:
		return g.Had
	}
	panic(fmt.Sprintf("detector: layer %d out of range", layer))
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
		InnerRadiusM: k.InnerRadiusM, EndcapZM: k.EndcapZM,
		ZeroSuppressionCounts: k.ZeroSuppressionCounts, EM: k.EM, Had: k.Had,
		MuonEtaMax: c.Muon.EtaMax, MuonMinMomentumGeV: c.Muon.MinMomentumGeV,
		MuonStations: slices.Clone(c.Muon.Stations), MuonSources: c.Readout.MuonSources,
	}
	if g.InnerRadiusM == 0 {
		g.InnerRadiusM = 1.5
	}
	if g.EndcapZM == 0 {
		g.EndcapZM = 3.6
	}
	if g.ZeroSuppressionCounts == 0 {
		g.ZeroSuppressionCounts = 1
	}
	if err := g.validateResponse(c); err != nil {
		return nil, err
	}
	g.etaCentre = make([]float64, g.EtaBins)
	g.coshEta = make([]float64, g.EtaBins)
	for i := range g.etaCentre {
		g.etaCentre[i] = -g.EtaMax + (float64(i)+0.5)*g.EtaStep
		g.coshEta[i] = math.Cosh(g.etaCentre[i])
	}
	return g, nil
}

// validateResponse checks the calorimeter response, the muon system and the
// readout settings.
func (g *Geometry) validateResponse(c Config) error {
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	switch {
	case !(g.InnerRadiusM > 0) || !finite(g.InnerRadiusM):
		return fmt.Errorf("calorimeter.inner_radius_m = %v, want a finite value > 0", c.Calo.InnerRadiusM)
	case !(g.EndcapZM > 0) || !finite(g.EndcapZM):
		return fmt.Errorf("calorimeter.endcap_z_m = %v, want a finite value > 0", c.Calo.EndcapZM)
	case g.ZeroSuppressionCounts > g.MaxCount:
		return fmt.Errorf("calorimeter.zero_suppression_counts = %d is above max_count %d", g.ZeroSuppressionCounts, g.MaxCount)
	}
	for _, l := range []struct {
		name string
		r    LayerResponse
	}{{"em", g.EM}, {"had", g.Had}} {
		for _, v := range []struct {
			key string
			x   float64
			max float64
		}{{"stochastic", l.r.Stochastic, 10}, {"constant", l.r.Constant, 1}, {"noise_gev", l.r.NoiseGeV, 100}, {"spread", l.r.Spread, 1}} {
			if !(v.x >= 0 && v.x <= v.max) {
				return fmt.Errorf("calorimeter.%s.%s = %v, want 0..%v", l.name, v.key, v.x, v.max)
			}
		}
	}
	m := c.Muon
	if len(m.Stations) > 0 && (!(m.EtaMax > 0) || !finite(m.EtaMax)) {
		return fmt.Errorf("muon.eta_max = %v, want a finite value > 0", m.EtaMax)
	}
	if !(m.MinMomentumGeV >= 0) || !finite(m.MinMomentumGeV) {
		return fmt.Errorf("muon.min_momentum_gev = %v, want a finite value >= 0", m.MinMomentumGeV)
	}
	prev := g.InnerRadiusM
	for i, st := range m.Stations {
		if !(st.RadiusM > prev) || !finite(st.RadiusM) {
			return fmt.Errorf("muon.stations[%d].radius_m = %v, want a finite radius beyond %v m (calorimeter front, then increasing)", i, st.RadiusM, prev)
		}
		if !(st.RPhiResolutionMm >= 0) || !(st.ZResolutionMm >= 0) || !finite(st.RPhiResolutionMm) || !finite(st.ZResolutionMm) {
			return fmt.Errorf("muon.stations[%d]: resolutions must be finite and >= 0", i)
		}
		prev = st.RadiusM
	}
	r := c.Readout
	switch {
	case r.MuonSources < 0 || r.MuonSources > maxMuonSources:
		return fmt.Errorf("readout.muon_sources = %d, want 0..%d", r.MuonSources, maxMuonSources)
	case !(r.ClockOffsetMaxNs >= 0) || !finite(r.ClockOffsetMaxNs):
		return fmt.Errorf("readout.clock_offset_max_ns = %v, want a finite value >= 0", r.ClockOffsetMaxNs)
	case !(r.ClockJitterNs >= 0) || !finite(r.ClockJitterNs):
		return fmt.Errorf("readout.clock_jitter_ns = %v, want a finite value >= 0", r.ClockJitterNs)
	}
	return nil
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
