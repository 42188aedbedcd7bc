package runconfig

import (
	"strings"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
)

func TestExampleConfigurations(t *testing.T) {
	def := Default()
	if def.Sources != 16 || def.Seed != 42 || def.Generator.Kind != detector.GeneratorSimple {
		t.Fatalf("built-in configuration: %+v", def)
	}
	phys, err := Load("../../examples/run-physics.yaml")
	if err != nil {
		t.Fatal(err)
	}
	d := detector.DefaultDescription()
	_, ids, err := phys.Readout(d)
	if err != nil {
		t.Fatal(err)
	}
	// The physics generator models muons, so the muon sources send too.
	if len(ids) != 16+d.Geometry.MuonSources {
		t.Fatalf("physics run has %d sources", len(ids))
	}
	if _, err := phys.NewGenerator(d, mustPartition(t, d, phys)); err != nil {
		t.Fatal(err)
	}
	_, ids, _ = def.Readout(d)
	if len(ids) != 16 {
		t.Fatalf("toy run has %d sources, want the 16 calorimeter ones", len(ids))
	}
}

func mustPartition(t *testing.T, d *detector.Description, c Config) *detector.Partition {
	t.Helper()
	p, _, err := c.Readout(d)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func TestBadConfigurations(t *testing.T) {
	for text, want := range map[string]string{
		"sources: 0\nrate_hz: -1\n":         "rate_hz",
		"sources: 500\n":                    "sources",
		"no_such_key: 1\n":                  "no_such_key",
		"builder: {when_full: sometimes}\n": "when_full",
		"generator: {kind: dreams}\n":       "dreams",
		"faults: [{drop: 2}]\n":             "drop",
		"subject_prefix: \"a b\"\n":         "prefix",
	} {
		if _, err := Parse("bad.yaml", []byte(text)); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: error %v, want one naming %q", text, err, want)
		}
	}
}
