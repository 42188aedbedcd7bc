package detector

import (
	"runtime"
	"testing"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"google.golang.org/protobuf/proto"
)

// encoder turns a crossing into one sealed, marshalled fragment per source,
// as a readout emulator does; it reuses its messages and buffer.
type encoder struct {
	part  *Partition
	calo  []*pb.Fragment
	muon  []*pb.Fragment
	buf   []byte
	bytes int
}

func newEncoder(part *Partition) *encoder {
	e := &encoder{part: part}
	for range part.CaloSources() {
		e.calo = append(e.calo, &pb.Fragment{Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{}}})
	}
	for range part.MuonSources() {
		e.muon = append(e.muon, &pb.Fragment{Payload: &pb.Fragment_Muon{Muon: &pb.MuonPayload{}}})
	}
	return e
}

func (e *encoder) encode(tb testing.TB, c *Crossing) {
	opts := proto.MarshalOptions{}
	head := func(f *pb.Fragment, id uint32) {
		f.SourceId, f.Run, f.Orbit, f.Bcid, f.TimestampNs, f.Status = id, 1, c.Orbit, c.Bcid, c.SourceTimestamp(id), 0
	}
	for i, f := range e.calo {
		id := uint32(i + 1)
		head(f, id)
		if c.Saturated[i] {
			f.Status |= uint32(pb.FragmentStatus_FRAGMENT_STATUS_SATURATED)
		}
		p := f.GetCalo()
		p.Towers, p.EtCounts = p.Towers[:0], p.EtCounts[:0]
		for _, tc := range c.PerSource[i] {
			p.Towers = append(p.Towers, tc.Tower)
			p.EtCounts = append(p.EtCounts, tc.Counts)
		}
		e.marshal(tb, opts, f)
	}
	for k, f := range e.muon {
		head(f, e.part.MuonSourceID(k))
		p := f.GetMuon()
		hits := p.Hits[:cap(p.Hits)]
		n := 0
		for _, h := range c.MuonHits[k] {
			if n == len(hits) {
				hits = append(hits, &pb.MuonHit{})
				hits = hits[:cap(hits)]
			}
			if hits[n] == nil {
				hits[n] = &pb.MuonHit{}
			}
			hits[n].Station, hits[n].XMm, hits[n].YMm, hits[n].ZMm = uint32(h.Station), float32(h.X), float32(h.Y), float32(h.Z)
			n++
		}
		p.Hits = hits[:n]
		e.marshal(tb, opts, f)
	}
}

func (e *encoder) marshal(tb testing.TB, opts proto.MarshalOptions, f *pb.Fragment) {
	f.Seal()
	var err error
	e.buf, err = opts.MarshalAppend(e.buf[:0], f)
	if err != nil {
		tb.Fatal(err)
	}
	e.bytes += len(e.buf)
}

// BenchmarkPhysicsGenerator makes crossings at mu = 60 (natural mix of hard
// processes) and encodes every source's fragment. crossings/s is the
// wall-clock rate; crossings/cpu-s divides by the CPU time of the thread
// running the loop (where the platform reports it), which stays close to
// the one-core figure when other work shares the machine.
func BenchmarkPhysicsGenerator(b *testing.B) {
	d := DefaultDescription()
	part, err := NewPartition(d.Geometry, 16)
	if err != nil {
		b.Fatal(err)
	}
	g, err := NewPhysicsGenerator(d, part, 1, PhysicsConfig{Mu: 60})
	if err != nil {
		b.Fatal(err)
	}
	enc := newEncoder(part)
	var c Crossing
	b.ReportAllocs()
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	cpu0 := threadCPUTime()
	for i := 0; b.Loop(); i++ {
		g.Generate(uint64(i), &c)
		enc.encode(b, &c)
	}
	cpu := threadCPUTime() - cpu0
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "crossings/s")
	if cpu > 0 {
		b.ReportMetric(float64(b.N)/cpu.Seconds(), "crossings/cpu-s")
	}
	b.ReportMetric(float64(enc.bytes)/float64(b.N), "bytes/crossing")
}

// BenchmarkPhysicsGeneratorOnly is the generator without encoding.
func BenchmarkPhysicsGeneratorOnly(b *testing.B) {
	d := DefaultDescription()
	part, _ := NewPartition(d.Geometry, 16)
	g, err := NewPhysicsGenerator(d, part, 1, PhysicsConfig{Mu: 60})
	if err != nil {
		b.Fatal(err)
	}
	var c Crossing
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		g.Generate(uint64(i), &c)
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "crossings/s")
}
