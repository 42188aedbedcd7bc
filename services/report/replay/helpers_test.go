package replay

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
	"github.com/bunchsieve/bunchsieve/trigger"
)

// starterMenu returns the example menu shipped with the binary.
func starterMenu(t testing.TB) *trigger.Menu {
	t.Helper()
	data, err := fs.ReadFile(examples.FS, examples.StarterMenu)
	if err != nil {
		t.Fatal(err)
	}
	m, err := trigger.ParseMenu(examples.StarterMenu, data)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// physicsMenu returns the 62-rule physics example menu.
func physicsMenu(t testing.TB) *trigger.Menu {
	t.Helper()
	const name = "menus/lantern-physics.yaml"
	data, err := fs.ReadFile(examples.FS, name)
	if err != nil {
		t.Fatal(err)
	}
	m, err := trigger.ParseMenu(name, data)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// recordStream writes crossings of gen through the readout emulator into
// a stream file, with the truth of every crossing when truth is set; the
// sources are the calorimeter ones.
func recordStream(t testing.TB, gen detector.Generator, part *detector.Partition, crossings uint64, truth bool, faults ...emulator.Fault) string {
	t.Helper()
	return record(t, gen, part, nil, crossings, truth, 32, faults)
}

// recordReadout is recordStream with every source of part, muon sources
// included and filled as the readout fills them, batches of batch
// crossings, and no truth.
func recordReadout(t testing.TB, gen detector.Generator, part *detector.Partition, crossings uint64, batch uint32, faults ...emulator.Fault) string {
	t.Helper()
	return record(t, gen, part, part, crossings, false, batch, faults)
}

// record writes the stream; with muons set, it records every source of
// part and lets the emulator fill the muon ones.
func record(t testing.TB, gen detector.Generator, part, muons *detector.Partition, crossings uint64, truth bool, batch uint32, faults []emulator.Fault) string {
	t.Helper()
	ids := part.SourceIDs()
	if muons != nil {
		ids = part.AllSourceIDs()
	}
	path := filepath.Join(t.TempDir(), "replay.bss")
	h := &pb.StreamHeader{Run: 1, Seed: 9, SourceIds: ids, Partitions: 1, BatchCrossings: batch,
		Generator: "test", Detector: string(detector.BuiltinDescriptionYAML())}
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
	emu, err := emulator.New(emulator.Config{Run: 1, Seed: 9, Crossings: crossings, BatchCrossings: int(batch), Faults: faults, Partition: muons}, gen, ids,
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

func simpleGenerator(t testing.TB, seed uint64) (detector.Generator, *detector.Partition) {
	t.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	// A hard-scatter-rich toy sample, so that every rule of the starter
	// menu fires in a few thousand crossings.
	gen, err := detector.NewSimpleGenerator(d, part, seed, detector.SimpleConfig{DijetFraction: 0.2, InvisibleFraction: 0.1, JetMinGeV: 40})
	if err != nil {
		t.Fatal(err)
	}
	return gen, part
}

// decided is a copy of what the sink saw of one event.
type decided struct {
	orbit        uint64
	bcid         uint32
	flags        uint32
	passed, kept []bool
	accept       bool
	values       []float64
	truthN       int64
}

func collect(t testing.TB, src Source, cfg Config) ([]decided, Summary) {
	t.Helper()
	var out []decided
	sum, err := Run(context.Background(), src, cfg, func(e *Event) error {
		d := decided{orbit: e.Orbit, bcid: e.Bcid, flags: e.Flags, accept: e.Accept[0], truthN: -1,
			passed: append([]bool(nil), e.Passed[0]...), kept: append([]bool(nil), e.Kept[0]...),
			values: append([]float64(nil), e.Values...)}
		if e.Truth != nil {
			d.truthN = int64(e.Truth.N)
		}
		out = append(out, d)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out, sum
}
