// Package runconfig is the run configuration shared by the all-in-one stack
// and the separate services: one YAML file (see examples/run.yaml) whose
// values command-line flags can override.
package runconfig

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Config is a run configuration. Its zero value is completed by Defaults.
type Config struct {
	Run            uint32        `yaml:"run"`
	Seed           uint64        `yaml:"seed"`
	Sources        int           `yaml:"sources"`
	RateHz         float64       `yaml:"rate_hz"`
	Menu           string        `yaml:"menu"`
	Detector       string        `yaml:"detector"`
	BatchCrossings int           `yaml:"batch_crossings"`
	StatusEvery    time.Duration `yaml:"status_every"`
	SubjectPrefix  string        `yaml:"subject_prefix"`
	// LumiSliceOrbits overrides the detector description's lumi-slice
	// length; zero keeps it.
	LumiSliceOrbits uint64                   `yaml:"lumi_slice_orbits"`
	Generator       detector.GeneratorConfig `yaml:"generator"`
	Builder         BuilderSettings          `yaml:"builder"`
	// Faults are readout faults the emulator injects; empty means none.
	Faults []emulator.Fault `yaml:"faults"`
}

// BuilderSettings are the event builder's settings as written in YAML.
type BuilderSettings struct {
	Lateness  time.Duration `yaml:"lateness"`
	DeadAfter time.Duration `yaml:"dead_after"`
	Window    int           `yaml:"window"`
	WhenFull  string        `yaml:"when_full"`
}

// Default returns the built-in configuration (examples/run.yaml).
func Default() Config {
	data, err := fs.ReadFile(examples.FS, "run.yaml")
	if err != nil {
		panic("runconfig: built-in run.yaml missing: " + err.Error())
	}
	c, err := Parse("run.yaml", data)
	if err != nil {
		panic("runconfig: built-in run.yaml invalid: " + err.Error())
	}
	return c
}

// Load reads a configuration file over the built-in defaults.
func Load(path string) (Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Config{}, fmt.Errorf("runconfig: %w", err)
	}
	return Parse(path, data)
}

// Parse decodes a configuration, rejecting unknown keys; file names the
// input in errors.
func Parse(file string, data []byte) (Config, error) {
	var c Config
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	if err := dec.Decode(&c); err != nil && !errors.Is(err, io.EOF) {
		return Config{}, fmt.Errorf("runconfig: %s: %v", file, err)
	}
	c.fill()
	if err := c.Validate(); err != nil {
		return Config{}, fmt.Errorf("runconfig: %s: %v", file, err)
	}
	return c, nil
}

func (c *Config) fill() {
	if c.Run == 0 {
		c.Run = 1
	}
	if c.Sources == 0 {
		c.Sources = 16
	}
	if c.BatchCrossings == 0 {
		c.BatchCrossings = 32
	}
	if c.StatusEvery == 0 {
		c.StatusEvery = time.Second
	}
	if c.Builder.WhenFull == "" {
		c.Builder.WhenFull = "evict"
	}
}

// Validate names the first setting that cannot work.
func (c Config) Validate() error {
	switch {
	case c.Sources < 1 || c.Sources > 128:
		return fmt.Errorf("sources = %d, want 1..128", c.Sources)
	case !(c.RateHz >= 0) || math.IsInf(c.RateHz, 0):
		return fmt.Errorf("rate_hz = %v, want a finite value >= 0", c.RateHz)
	case c.BatchCrossings < 1 || c.BatchCrossings > 4096:
		return fmt.Errorf("batch_crossings = %d, want 1..4096", c.BatchCrossings)
	case c.StatusEvery < 0:
		return fmt.Errorf("status_every = %v, want >= 0", c.StatusEvery)
	case c.Builder.Lateness < 0 || c.Builder.DeadAfter < 0 || c.Builder.Window < 0:
		return fmt.Errorf("builder settings must not be negative")
	case c.Builder.WhenFull != "evict" && c.Builder.WhenFull != "block":
		return fmt.Errorf("builder.when_full = %q, want evict or block", c.Builder.WhenFull)
	}
	if err := c.Generator.Validate(); err != nil {
		return err
	}
	for _, f := range c.Faults {
		if err := f.Validate(); err != nil {
			return err
		}
	}
	return transport.Subjects{Prefix: c.SubjectPrefix}.Validate()
}

// Subjects returns the subject layout of the run.
func (c Config) Subjects() transport.Subjects { return transport.Subjects{Prefix: c.SubjectPrefix} }

// LoadDetector returns the detector description of the run.
func (c Config) LoadDetector() (*detector.Description, error) {
	if c.Detector == "" {
		return detector.DefaultDescription(), nil
	}
	return detector.LoadDescription(c.Detector)
}

// LoadMenu returns the menu of the run: the file named by Menu, or the
// built-in starter menu.
func (c Config) LoadMenu() (*trigger.Menu, error) {
	if c.Menu == "" {
		data, err := fs.ReadFile(examples.FS, examples.StarterMenu)
		if err != nil {
			return nil, fmt.Errorf("runconfig: built-in menu: %w", err)
		}
		return trigger.ParseMenu("examples/"+examples.StarterMenu, data)
	}
	return trigger.LoadMenu(c.Menu)
}

// BuilderConfig returns the builder library settings for the run's sources.
func (c Config) BuilderConfig(sources []uint32) builder.Config {
	bc := builder.Config{
		Run: c.Run, Sources: sources,
		Lateness: int64(c.Builder.Lateness), DeadAfter: int64(c.Builder.DeadAfter), Window: c.Builder.Window,
	}
	if c.Builder.WhenFull == "block" {
		bc.WhenFull = builder.Block
	}
	return bc
}

// Readout returns the run's partition of the detector into sources and the
// ids of the sources that send fragments: the calorimeter sources, and the
// muon sources when the generator models muons (the toy generator does
// not, so its runs have no muon sources).
func (c Config) Readout(d *detector.Description) (*detector.Partition, []uint32, error) {
	part, err := detector.NewPartition(d.Geometry, c.Sources)
	if err != nil {
		return nil, nil, err
	}
	if c.Generator.Kind == "" || c.Generator.Kind == detector.GeneratorSimple {
		return part, part.SourceIDs(), nil
	}
	return part, part.AllSourceIDs(), nil
}

// NewGenerator returns the run's crossing generator over d and part.
func (c Config) NewGenerator(d *detector.Description, part *detector.Partition) (detector.Generator, error) {
	return detector.NewGenerator(d, part, c.Seed, c.Generator)
}

// LumiSlice returns the run's lumi-slice length in orbits: the override,
// or the detector description's.
func (c Config) LumiSlice(d *detector.Description) uint64 {
	if c.LumiSliceOrbits > 0 {
		return c.LumiSliceOrbits
	}
	return d.Config.LumiSliceOrbits
}
