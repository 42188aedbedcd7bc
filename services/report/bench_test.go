package report

import (
	"context"
	"io/fs"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
	"github.com/bunchsieve/bunchsieve/trigger"
)

var (
	benchOnce sync.Once
	benchPath string
)

// TestMain removes the benchmark stream, recorded outside any test's
// temporary directory so that every benchmark can share it.
func TestMain(m *testing.M) {
	code := m.Run()
	if benchPath != "" {
		os.RemoveAll(filepath.Dir(benchPath))
	}
	os.Exit(code)
}

// benchStream records, once per test binary, 20000 crossings of the
// physics generator at pile-up 60 (16 calorimeter sources, truth
// included), the sample of the performance figure in
// docs/report-format.md.
func benchStream(b *testing.B) string {
	benchOnce.Do(func() {
		gen, part := physicsGen(b, 42, detector.PhysicsConfig{Mu: 60})
		dir, err := os.MkdirTemp("", "report-bench")
		if err != nil {
			b.Fatal(err)
		}
		benchPath = filepath.Join(dir, "mu60.bss")
		if err := os.Rename(recordStream(b, gen, part, 20000, true), benchPath); err != nil {
			b.Fatal(err)
		}
	})
	return benchPath
}

// BenchmarkReportStream is the whole replay of the example menu over the
// recorded mu = 60 stream: reading, decompression, decoding, event
// building with checksums, features, decisions, the report's counts and
// the per-event ROOT tree, then report.json, rates.csv and the plots.
func BenchmarkReportStream(b *testing.B) {
	m, text := starter(b)
	ef, _ := ParseEfficiency("met-120:met")
	benchReport(b, Options{Menu: m, MenuSource: text, Efficiencies: []EfficiencySpec{ef}})
}

// BenchmarkReportStreamPhysics is BenchmarkReportStream with the 62 rules
// of the physics example menu and no efficiency, what `bunchsieve replay
// --menu examples/menus/lantern-physics.yaml` computes and writes.
func BenchmarkReportStreamPhysics(b *testing.B) {
	const name = "menus/lantern-physics.yaml"
	text, err := fs.ReadFile(examples.FS, name)
	if err != nil {
		b.Fatal(err)
	}
	m, err := trigger.ParseMenu(name, text)
	if err != nil {
		b.Fatal(err)
	}
	benchReport(b, Options{Menu: m, MenuSource: text})
}

func benchReport(b *testing.B, opts Options) {
	path := benchStream(b)
	dir := b.TempDir()
	opts.RootFile = filepath.Join(dir, ROOTFile)
	info, _ := os.Stat(path)
	b.SetBytes(info.Size())
	b.ReportAllocs()
	cpu0 := cpuSeconds()
	var events uint64
	for b.Loop() {
		src, err := replay.OpenStream(path)
		if err != nil {
			b.Fatal(err)
		}
		rep, err := Run(context.Background(), src, opts)
		if err != nil {
			b.Fatal(err)
		}
		if err := rep.WriteFiles(dir); err != nil {
			b.Fatal(err)
		}
		src.Close()
		events += rep.Processing.Crossings
	}
	b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
	if cpu := cpuSeconds() - cpu0; cpu > 0 {
		b.ReportMetric(cpu/float64(events)*1e6, "cpu-us/event")
		b.ReportMetric(float64(events)/cpu, "events/cpu-s")
	}
}
