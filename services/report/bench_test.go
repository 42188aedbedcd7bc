package report

import (
	"context"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/report/replay"
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
	path := benchStream(b)
	m, text := starter(b)
	dir := b.TempDir()
	ef, _ := ParseEfficiency("met-120:met")
	opts := Options{Menu: m, MenuSource: text, Efficiencies: []EfficiencySpec{ef}, RootFile: filepath.Join(dir, ROOTFile)}
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
	}
}
