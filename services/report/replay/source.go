package replay

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
)

// Sample describes where the events of a replay come from, for the
// report.
type Sample struct {
	// Kind is "stream" (a recorded stream file) or "generator".
	Kind string
	// Path is the stream file as given; empty for a generator.
	Path string
	// Generator is the generator's kind ("physics", "simple", ...), as the
	// stream header or the generator settings say; GeneratorConfig its
	// settings as YAML text.
	Generator       string
	GeneratorConfig string
	Seed            uint64
	// Mu is the mean pile-up of the sample, or 0 where it is not known.
	Mu float64
	// Run is the run number the fragments carry.
	Run uint32
	// Sources lists the source ids the builder expects.
	Sources []uint32
	// Truth says whether events carry generator truth records.
	Truth bool
	// Crossings is the number of crossings a generator makes, 0 for a
	// stream (its length is known at its end).
	Crossings uint64
	// Description is the detector and machine description of the sample.
	Description *detector.Description
}

// Source yields the fragments and truth records of a replay. The sources
// are OpenStream and NewGeneratorSource.
type Source interface {
	// Sample describes the source.
	Sample() Sample
	// source keeps the set of sources to this package's: a stream
	// replays on lanes (lanes.go), a generator through the feeder
	// (GeneratorSource.feed).
	source()
}

func (*StreamSource) source()    {}
func (*GeneratorSource) source() {}

// StreamSource reads a recorded stream file (docs/stream-format.md), as
// long as the file was when opened: its lanes read it through clones of
// one recording.Reader. It is used by one Run and is not safe for
// concurrent use; Close it afterwards.
type StreamSource struct {
	r      *recording.Reader
	sample Sample
	size   int64
}

// OpenStream opens a stream file for a replay. The header's detector
// description (the built-in one if the header has none) gives the
// geometry and the filling scheme.
func OpenStream(path string) (*StreamSource, error) {
	r, err := recording.Open(path)
	if err != nil {
		return nil, err
	}
	h := r.Header()
	desc := detector.DefaultDescription()
	if h.Detector != "" {
		if desc, err = detector.ParseDescription(path+" (header)", []byte(h.Detector)); err != nil {
			r.Close()
			return nil, fmt.Errorf("replay: %w", err)
		}
	}
	if len(h.SourceIds) == 0 {
		r.Close()
		return nil, fmt.Errorf("replay: %s: the stream header lists no sources", path)
	}
	var size int64
	if info, err := os.Stat(path); err == nil {
		size = info.Size()
	}
	s := &StreamSource{r: r, size: size, sample: Sample{
		Kind: "stream", Path: path, Generator: h.Generator, GeneratorConfig: h.GeneratorConfig,
		Seed: h.Seed, Mu: muOf(h.GeneratorConfig, h.Generator, desc), Run: h.Run, Sources: append([]uint32(nil), h.SourceIds...),
		Truth: r.HasTruth(), Description: desc,
	}}
	return s, nil
}

// muOf reads the mean pile-up from a stream's generator settings: the
// selected generator's (GeneratorConfig.MeanPileUp, so that a toy
// generator's stream reports its own mu, not the physics section's), or
// a top-level mu where the settings have one; 0 when there are none or
// they do not parse.
func muOf(config, kind string, d *detector.Description) float64 {
	if strings.TrimSpace(config) == "" {
		return 0
	}
	var v struct {
		Mu                       float64 `yaml:"mu"`
		detector.GeneratorConfig `yaml:",inline"`
	}
	if yaml.Unmarshal([]byte(config), &v) != nil {
		return 0
	}
	if v.Mu > 0 {
		return v.Mu
	}
	if v.Kind == "" {
		v.Kind = kind
	}
	return v.MeanPileUp(d)
}

// Sample describes the stream.
func (s *StreamSource) Sample() Sample { return s.sample }

// Close closes the file.
func (s *StreamSource) Close() error { return s.r.Close() }

// GeneratorSource makes crossings with a detector generator: Workers
// goroutines, each with its own generator, make crossings in blocks, and
// the feeder takes them in crossing order, so the events do not depend on
// the number of workers. It is used by one Run. Fragments are built in memory and go through the
// builder like a stream's, without the wire encoding (their checksums are
// not computed, as on the builder's trusted in-process path).
type GeneratorSource struct {
	gens   []detector.Generator
	part   *detector.Partition
	sample Sample
}

// GeneratorConfig sets up a GeneratorSource. The zero value makes nothing:
// Crossings must be set.
type GeneratorConfig struct {
	// Description is the detector and machine; nil means the built-in
	// Lantern/Meridian description.
	Description *detector.Description
	// Generator selects and sets the generator; its zero value is the toy
	// generator (detector.GeneratorConfig).
	Generator detector.GeneratorConfig
	// Seed seeds the generator.
	Seed uint64
	// Crossings is the number of crossings to make (> 0).
	Crossings uint64
	// CaloSources is the number of calorimeter sources; zero means the
	// description's readout.calo_sources.
	CaloSources int
	// Run is the run number of the fragments; zero means 1.
	Run uint32
	// Workers is the number of generating goroutines; zero means 2.
	Workers int
}

// NewGeneratorSource builds the generators of cfg.
func NewGeneratorSource(cfg GeneratorConfig) (*GeneratorSource, error) {
	if cfg.Crossings == 0 {
		return nil, errors.New("replay: a generator source needs a number of crossings > 0")
	}
	d := cfg.Description
	if d == nil {
		d = detector.DefaultDescription()
	}
	if cfg.CaloSources == 0 {
		cfg.CaloSources = d.Config.Readout.CaloSources
	}
	if cfg.Run == 0 {
		cfg.Run = 1
	}
	if cfg.Workers <= 0 {
		cfg.Workers = 2
	}
	part, err := detector.NewPartition(d.Geometry, cfg.CaloSources)
	if err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	s := &GeneratorSource{part: part}
	mu := 0.0
	for range cfg.Workers {
		g, err := detector.NewGenerator(d, part, cfg.Seed, cfg.Generator)
		if err != nil {
			return nil, fmt.Errorf("replay: %w", err)
		}
		if pg, ok := g.(interface{ Mu() float64 }); ok {
			mu = pg.Mu()
		}
		s.gens = append(s.gens, g)
	}
	kind := cfg.Generator.Kind
	if kind == "" {
		kind = detector.GeneratorSimple
	}
	if kind == detector.GeneratorSimple {
		mu = cfg.Generator.MeanPileUp(d)
	}
	text, err := yaml.Marshal(generatorSettings(cfg.Generator, kind))
	if err != nil {
		return nil, fmt.Errorf("replay: encode generator settings: %w", err)
	}
	// The sources the readout would have (runconfig.Config.Readout): the
	// toy generator reads the calorimeter only, the others the muon
	// stations too.
	sources := part.SourceIDs()
	if kind != detector.GeneratorSimple {
		sources = part.AllSourceIDs()
	}
	s.sample = Sample{
		Kind: "generator", Generator: kind, GeneratorConfig: string(text), Seed: cfg.Seed, Mu: mu,
		Run: cfg.Run, Sources: sources, Truth: true, Crossings: cfg.Crossings, Description: d,
	}
	return s, nil
}

// Sample describes the generator.
func (s *GeneratorSource) Sample() Sample { return s.sample }

// generatorSettings keeps the settings of the selected generator kind
// only, for the report.
func generatorSettings(g detector.GeneratorConfig, kind string) any {
	switch kind {
	case detector.GeneratorSimple:
		return struct {
			Kind   string                `yaml:"kind"`
			Simple detector.SimpleConfig `yaml:"simple"`
		}{kind, g.Simple}
	case detector.GeneratorHepMC:
		return struct {
			Kind      string                 `yaml:"kind"`
			HepMCFile string                 `yaml:"hepmc_file"`
			Physics   detector.PhysicsConfig `yaml:"physics"`
		}{kind, g.HepMCFile, g.Physics}
	}
	return struct {
		Kind    string                 `yaml:"kind"`
		Physics detector.PhysicsConfig `yaml:"physics"`
	}{kind, g.Physics}
}

// genBlock is a run of consecutive crossings made by one worker.
type genBlock struct {
	first uint64
	n     int
	cs    []detector.Crossing
}

const genBlockSize = 64

func (s *GeneratorSource) feed(ctx context.Context, fd *feeder) error {
	total := s.sample.Crossings
	blocks := (total + genBlockSize - 1) / genBlockSize
	w := len(s.gens)
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	out := make([]chan *genBlock, w)
	free := make([]chan *genBlock, w)
	done := make(chan struct{}, w)
	for i, g := range s.gens {
		out[i], free[i] = make(chan *genBlock, 2), make(chan *genBlock, 3)
		for range 3 {
			free[i] <- &genBlock{cs: make([]detector.Crossing, genBlockSize)}
		}
		go func() {
			defer func() { done <- struct{}{} }()
			for k := uint64(i); k < blocks; k += uint64(w) {
				var b *genBlock
				select {
				case b = <-free[i]:
				case <-ctx.Done():
					return
				}
				b.first = k * genBlockSize
				b.n = int(min(genBlockSize, total-b.first))
				for j := range b.n {
					g.Generate(b.first+uint64(j), &b.cs[j])
				}
				select {
				case out[i] <- b:
				case <-ctx.Done():
					return
				}
			}
		}()
	}
	defer func() {
		cancel()
		for range w {
			<-done
		}
	}()
	sources := s.sample.Sources
	for k := uint64(0); k < blocks; k++ {
		var b *genBlock
		select {
		case b = <-out[k%uint64(w)]:
		case <-ctx.Done():
			return ctx.Err()
		}
		for j := range b.n {
			c := &b.cs[j]
			fd.addTruth(&recording.TruthRecord{N: c.N, Orbit: c.Orbit, Bcid: c.Bcid, Interactions: c.Interactions,
				TrueMETx: c.TrueMETx, TrueMETy: c.TrueMETy, Truth: c.Truth})
			for i, id := range sources {
				sl := fd.cache.get()
				f := &sl.f
				f.SourceId, f.Run, f.Orbit, f.Bcid = id, s.sample.Run, c.Orbit, c.Bcid
				f.TimestampNs, f.Status, f.Checksum = c.SourceTimestamp(id), 0, 0
				if pos, ok := s.part.MuonPosition(id); ok {
					// As the readout fills a muon source's fragment
					// (services/emulator): its hits, sorted by station.
					sl.hits = sl.hits[:0]
					if pos < len(c.MuonHits) {
						for _, h := range c.MuonHits[pos] {
							sl.hits = append(sl.hits, pb.MuonHit{Station: uint32(h.Station), XMm: float32(h.X), YMm: float32(h.Y), ZMm: float32(h.Z)})
						}
					}
					sl.muonP.Hits = sl.muonP.Hits[:0]
					for k := range sl.hits {
						sl.muonP.Hits = append(sl.muonP.Hits, &sl.hits[k])
					}
					f.Payload = &sl.muon
					fd.add(f)
					continue
				}
				if i < len(c.Saturated) && c.Saturated[i] {
					f.Status = uint32(pb.FragmentStatus_FRAGMENT_STATUS_SATURATED)
				}
				sl.caloP.Towers, sl.caloP.EtCounts = sl.caloP.Towers[:0], sl.caloP.EtCounts[:0]
				if i < len(c.PerSource) {
					for _, tc := range c.PerSource[i] {
						sl.caloP.Towers = append(sl.caloP.Towers, tc.Tower)
						sl.caloP.EtCounts = append(sl.caloP.EtCounts, tc.Counts)
					}
				}
				f.Payload = &sl.calo
				fd.add(f)
			}
		}
		fd.progress(float64(b.first+uint64(b.n)) / float64(total))
		free[k%uint64(w)] <- b
	}
	return nil
}
