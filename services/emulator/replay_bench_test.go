package emulator

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// recordSample writes crossings of the toy generator to a stream file.
func recordSample(tb testing.TB, crossings uint64) string {
	tb.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		tb.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, 1, detector.SimpleConfig{})
	if err != nil {
		tb.Fatal(err)
	}
	path := filepath.Join(tb.TempDir(), "bench.bss")
	w, err := recording.Create(path, &pb.StreamHeader{Run: 1, Seed: 1, SourceIds: part.SourceIDs(), Partitions: 1})
	if err != nil {
		tb.Fatal(err)
	}
	emu, err := New(Config{Crossings: crossings}, gen, part.SourceIDs(), FileSink{W: w}, prometheus.NewRegistry())
	if err != nil {
		tb.Fatal(err)
	}
	if err := emu.Run(context.Background()); err != nil {
		tb.Fatal(err)
	}
	w.AddCrossings(crossings)
	if err := w.Close(); err != nil {
		tb.Fatal(err)
	}
	return path
}

// BenchmarkReplay publishes a recorded stream as fast as possible through
// an embedded NATS server over an in-process connection, reading and
// checksumming the file included.
func BenchmarkReplay(b *testing.B) {
	path := recordSample(b, 20000)
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		b.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	nc, err := transport.ConnectInProcess(srv, "bench")
	if err != nil {
		b.Fatal(err)
	}
	defer nc.Close()
	sink := NewNATSSink(nc, transport.Subjects{})
	var fragments uint64
	b.ReportAllocs()
	for b.Loop() {
		r, err := recording.Open(path)
		if err != nil {
			b.Fatal(err)
		}
		st, err := Replay(context.Background(), r, sink, Pace{})
		if err != nil {
			b.Fatal(err)
		}
		r.Close()
		fragments += st.Fragments
	}
	b.ReportMetric(float64(fragments)/b.Elapsed().Seconds(), "fragments/s")
}

// BenchmarkGenerateAndEncode measures the toy generator with fragment
// encoding into batches, writing to a sink that discards.
func BenchmarkGenerateAndEncode(b *testing.B) {
	d := detector.DefaultDescription()
	part, _ := detector.NewPartition(d.Geometry, 16)
	gen, _ := detector.NewSimpleGenerator(d, part, 1, detector.SimpleConfig{})
	emu, err := New(Config{Crossings: uint64(b.N)}, gen, part.SourceIDs(), discard{}, prometheus.NewRegistry())
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	if err := emu.Run(context.Background()); err != nil {
		b.Fatal(err)
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "crossings/s")
}

type discard struct{}

func (discard) Send(int, uint32, int64, []byte, int) error { return nil }
func (discard) Flush() error                               { return nil }
