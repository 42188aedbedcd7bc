package replay

import (
	"context"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/trigger"
)

var (
	benchOnce, readoutOnce sync.Once
	benchPath, readoutPath string
)

// TestMain removes the benchmark stream, recorded outside any test's
// temporary directory so that every benchmark can share it.
func TestMain(m *testing.M) {
	code := m.Run()
	for _, p := range []string{benchPath, readoutPath} {
		if p != "" {
			os.RemoveAll(filepath.Dir(p))
		}
	}
	os.Exit(code)
}

// benchStream records, once per test binary, 20000 crossings of the
// physics generator at pile-up 60 with the 16 calorimeter sources of the
// built-in description, and their truth.
func benchStream(b *testing.B) string {
	return benchRecording(b, &benchOnce, &benchPath, "mu60.bss", func(gen detector.Generator, part *detector.Partition) string {
		return recordStream(b, gen, part, 20000, true)
	})
}

// readoutStream records, once per test binary, the same crossings as the
// whole readout sends them: the 16 calorimeter sources and the 8 muon
// sources, in batches of 32 crossings.
func readoutStream(b *testing.B) string {
	return benchRecording(b, &readoutOnce, &readoutPath, "mu60-readout.bss", func(gen detector.Generator, part *detector.Partition) string {
		return recordReadout(b, gen, part, 20000, 32)
	})
}

// benchRecording records, once, the physics generator at pile-up 60
// (seed 42, 16 calorimeter sources) with record into a directory of its
// own, which TestMain removes, and returns the file's path.
func benchRecording(b *testing.B, once *sync.Once, path *string, name string, record func(detector.Generator, *detector.Partition) string) string {
	once.Do(func() {
		d := detector.DefaultDescription()
		part, err := detector.NewPartition(d.Geometry, 16)
		if err != nil {
			b.Fatal(err)
		}
		gen, err := detector.NewPhysicsGenerator(d, part, 42, detector.PhysicsConfig{Mu: 60})
		if err != nil {
			b.Fatal(err)
		}
		dir, err := os.MkdirTemp("", "replay-bench")
		if err != nil {
			b.Fatal(err)
		}
		*path = filepath.Join(dir, name)
		if err := os.Rename(record(gen, part), *path); err != nil {
			b.Fatal(err)
		}
	})
	return *path
}

// BenchmarkReplayReadout is BenchmarkReplayStream over the stream the
// whole readout sends (calorimeter and muon sources, as `bunchsieve
// record` writes it): the replay's work in `bunchsieve replay` of the
// starter menu, without the report.
func BenchmarkReplayReadout(b *testing.B) { benchReplayPath(b, readoutStream(b), starterMenu(b)) }

// BenchmarkReplayStream replays a recorded mu = 60 stream through the
// builder and the starter menu, reading, decompressing, decoding and
// checksumming included, and reports events per second.
func BenchmarkReplayStream(b *testing.B) { benchReplay(b, starterMenu(b)) }

// BenchmarkReplayStreamPhysics is BenchmarkReplayStream with the 62 rules
// of the physics example menu, the work of a `bunchsieve replay` of that
// menu without the report.
func BenchmarkReplayStreamPhysics(b *testing.B) { benchReplay(b, physicsMenu(b)) }

func benchReplay(b *testing.B, m *trigger.Menu) { benchReplayPath(b, benchStream(b), m) }

func benchReplayPath(b *testing.B, path string, m *trigger.Menu) {
	info, _ := os.Stat(path)
	b.SetBytes(info.Size())
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := cpuSeconds()
	events := uint64(0)
	for b.Loop() {
		src, err := OpenStream(path)
		if err != nil {
			b.Fatal(err)
		}
		sum, err := Run(context.Background(), src, Config{Menus: []*trigger.Menu{m}}, func(*Event) error { return nil })
		if err != nil {
			b.Fatal(err)
		}
		src.Close()
		events += sum.Events
	}
	b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
	if cpu := cpuSeconds() - cpu0; cpu > 0 {
		b.ReportMetric(cpu/float64(events)*1e6, "cpu-us/event")
		b.ReportMetric(float64(events)/cpu, "events/cpu-s")
	}
}

// hotEvent returns the fragments of one generated mu = 60 crossing and
// their FragmentBatch encoding.
func hotEvent(b *testing.B) ([]*pb.Fragment, []byte) {
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		b.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 3, detector.PhysicsConfig{Mu: 60, LibraryEvents: 100})
	if err != nil {
		b.Fatal(err)
	}
	var c detector.Crossing
	gen.Generate(7, &c)
	batch := &pb.FragmentBatch{}
	for i, list := range c.PerSource {
		calo := &pb.CaloPayload{}
		for _, tc := range list {
			calo.Towers = append(calo.Towers, tc.Tower)
			calo.EtCounts = append(calo.EtCounts, tc.Counts)
		}
		batch.Fragments = append(batch.Fragments, &pb.Fragment{SourceId: uint32(i + 1), Payload: &pb.Fragment_Calo{Calo: calo}})
	}
	data, err := proto.Marshal(batch)
	if err != nil {
		b.Fatal(err)
	}
	return batch.Fragments, data
}

// BenchmarkDecodeBatch decodes the 16 fragments of one mu = 60 crossing.
func BenchmarkDecodeBatch(b *testing.B) {
	_, data := hotEvent(b)
	pool := newFragmentPool().cache()
	var out []*pb.Fragment
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		for _, f := range out {
			pool.put(f)
		}
		out, _, _ = decodeBatch(data, pool, out[:0])
	}
}

// BenchmarkTowerTable decodes the towers of one mu = 60 crossing for the
// selection.
func BenchmarkTowerTable(b *testing.B) {
	frags, _ := hotEvent(b)
	table := newTowerTable(detector.Lantern())
	var ev trigger.Event
	b.ReportAllocs()
	for b.Loop() {
		table.fill(frags, 1, &ev)
	}
	b.ReportMetric(float64(ev.NumTowers()), "towers/event")
}

// recordedBatchData returns the first 4000 fragment batches of the
// recorded mu = 60 stream.
func recordedBatchData(b *testing.B) [][]byte {
	r, err := recording.Open(benchStream(b))
	if err != nil {
		b.Fatal(err)
	}
	defer r.Close()
	var batches [][]byte
	for len(batches) < 4000 {
		bt, err := r.Next()
		if err != nil {
			break
		}
		batches = append(batches, append([]byte(nil), bt.Data...))
	}
	return batches
}

// BenchmarkDecodeRecorded decodes and checksums the fragment batches of
// the recorded mu = 60 stream, held in memory, and reports the cost per
// crossing (16 fragments).
func BenchmarkDecodeRecorded(b *testing.B) {
	batches := recordedBatchData(b)
	pool := newFragmentPool().cache()
	var out []*pb.Fragment
	var sum pb.Checksummer
	frags, k := 0, 0
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		for _, f := range out {
			pool.put(f)
		}
		out, _, _ = decodeBatch(batches[k], pool, out[:0])
		for _, f := range out {
			if sum.Sum(f) != f.Checksum {
				b.Fatal("a recorded fragment does not check")
			}
		}
		frags += len(out)
		k = (k + 1) % len(batches)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(frags)*16/1000, "us/crossing")
}

// BenchmarkDecodeRecordedFused is BenchmarkDecodeRecorded through the
// fused pass, which also keeps the towers for the selection (the workers
// then only look their cells up): most of the work of
// BenchmarkDecodeRecorded and BenchmarkTowerTable together.
func BenchmarkDecodeRecordedFused(b *testing.B) {
	batches := recordedBatchData(b)
	pool := newFragmentPool().cache()
	fz := newFuser(newTowerTable(detector.Lantern()))
	var out []*pb.Fragment
	var intact []bool
	frags, k := 0, 0
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		for _, f := range out {
			pool.put(f)
		}
		out, intact, _ = fz.decodeBatch(batches[k], pool, out[:0], intact[:0])
		for _, ok := range intact {
			if !ok {
				b.Fatal("a recorded fragment does not check")
			}
		}
		frags += len(out)
		k = (k + 1) % len(batches)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(frags)*16/1000, "us/crossing")
}
