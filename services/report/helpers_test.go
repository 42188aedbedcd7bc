package report

import (
	"context"
	"io/fs"
	"path/filepath"
	"testing"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// starter returns the example menu and its text.
func starter(t testing.TB) (*trigger.Menu, []byte) {
	t.Helper()
	data, err := fs.ReadFile(examples.FS, examples.StarterMenu)
	if err != nil {
		t.Fatal(err)
	}
	m, err := trigger.ParseMenu(examples.StarterMenu, data)
	if err != nil {
		t.Fatal(err)
	}
	return m, data
}

func parseMenu(t testing.TB, text string) *trigger.Menu {
	t.Helper()
	m, err := trigger.ParseMenu("test.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// toySource is a generator source of the toy model, rich in hard
// scatters so that every starter rule fires in a few thousand crossings.
func toySource(t testing.TB, seed, crossings uint64) *replay.GeneratorSource {
	t.Helper()
	src, err := replay.NewGeneratorSource(replay.GeneratorConfig{Seed: seed, Crossings: crossings,
		Generator: detector.GeneratorConfig{Simple: detector.SimpleConfig{DijetFraction: 0.2, InvisibleFraction: 0.1, JetMinGeV: 40}}})
	if err != nil {
		t.Fatal(err)
	}
	return src
}

func run(t testing.TB, src replay.Source, opts Options) *Report {
	t.Helper()
	rep, err := Run(context.Background(), src, opts)
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

func physicsGen(t testing.TB, seed uint64, cfg detector.PhysicsConfig) (detector.Generator, *detector.Partition) {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, seed, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return gen, part
}

// recordStream writes crossings of gen through the readout emulator into
// a stream file, with the truth of every crossing when truth is set.
func recordStream(t testing.TB, gen detector.Generator, part *detector.Partition, crossings uint64, truth bool) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "report.bss")
	h := &pb.StreamHeader{Run: 1, Seed: 8, SourceIds: part.SourceIDs(), Partitions: 1, BatchCrossings: 32,
		Generator: "physics", GeneratorConfig: "physics: {mu: 5}\n", Detector: string(detector.BuiltinDescriptionYAML())}
	create := recording.Create
	if truth {
		create = recording.CreateWithTruth
	}
	w, err := create(path, h)
	if err != nil {
		t.Fatal(err)
	}
	if truth {
		gen = recording.RecordTruth(gen, w)
	}
	emu, err := emulator.New(emulator.Config{Run: 1, Seed: 8, Crossings: crossings}, gen, part.SourceIDs(),
		emulator.FileSink{W: w}, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	w.AddCrossings(crossings)
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}
