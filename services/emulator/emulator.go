// Package emulator is the readout emulator service: it generates crossings,
// splits them into one fragment per source, optionally injects readout
// faults, and sends the fragments in per-source batches to a sink: NATS for
// a live run, a stream file for a recording.
package emulator

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Config sets up an emulator. The zero value of each field is explained
// beside it.
type Config struct {
	// Run is the run number written into every fragment; zero means 1.
	Run uint32
	// Seed seeds the fault injector (the generator has its own seed).
	Seed uint64
	// RateHz is the offered crossing rate; zero means as fast as possible.
	RateHz float64
	// Crossings stops the run after this many crossings; zero means run
	// until the context ends.
	Crossings uint64
	// BatchCrossings is how many crossings one batch of a source carries;
	// zero means 32.
	BatchCrossings int
	// Partitions is the number of builder instances sharing the crossings;
	// zero means 1.
	Partitions int
	// MaxBatchAge flushes partly filled batches this long after their first
	// fragment, so that low rates keep low latency; zero means 5 ms.
	MaxBatchAge time.Duration
	// Faults lists readout faults to inject; empty means none.
	Faults []Fault
	// Partition says which sources read muon stations; nil means every
	// source is a calorimeter source.
	Partition *detector.Partition
}

func (c *Config) fill() error {
	if c.Run == 0 {
		c.Run = 1
	}
	if c.BatchCrossings == 0 {
		c.BatchCrossings = 32
	}
	if c.Partitions == 0 {
		c.Partitions = 1
	}
	if c.MaxBatchAge == 0 {
		c.MaxBatchAge = 5 * time.Millisecond
	}
	switch {
	case !(c.RateHz >= 0) || math.IsInf(c.RateHz, 0):
		return fmt.Errorf("emulator: rate %v crossings/s, want a finite value >= 0", c.RateHz)
	case c.BatchCrossings < 1 || c.BatchCrossings > 4096:
		return fmt.Errorf("emulator: batch of %d crossings, want 1..4096", c.BatchCrossings)
	case c.Partitions < 1 || c.Partitions > 1024:
		return fmt.Errorf("emulator: %d partitions, want 1..1024", c.Partitions)
	}
	return nil
}

type metrics struct {
	crossings prometheus.Counter
	fragments prometheus.Counter
	bytes     prometheus.Counter
	batches   prometheus.Counter
}

func newMetrics(reg prometheus.Registerer) (*metrics, error) {
	m := &metrics{
		crossings: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_readout_crossings_total", Help: "Bunch crossings generated and offered by the readout emulator."}),
		fragments: prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_readout_fragments_sent_total", Help: "Fragments published by the readout emulator."}),
		bytes:     prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_readout_sent_bytes_total", Help: "Bytes of fragment batches published by the readout emulator."}),
		batches:   prometheus.NewCounter(prometheus.CounterOpts{Name: "bunchsieve_readout_batches_sent_total", Help: "Fragment batches published by the readout emulator."}),
	}
	for _, c := range []prometheus.Collector{m.crossings, m.fragments, m.bytes, m.batches} {
		if err := reg.Register(c); err != nil {
			return nil, fmt.Errorf("emulator: register metrics: %w", err)
		}
	}
	return m, nil
}

// Emulator sends generated crossings to a sink. Run may be called once;
// the counters are safe to read concurrently.
type Emulator struct {
	cfg     Config
	sink    Sink
	gen     detector.Generator
	sources []uint32
	m       *metrics
	inj     *injector

	offered atomic.Uint64
	sent    atomic.Uint64

	batches [][]*pb.FragmentBatch // [partition][source index]
	firstTs [][]int64
	seq     [][]uint64
	pool    [][][]*pb.Fragment // reusable fragments per batch slot
	delayed [][]held           // [source index] fragments held back by a delay fault
	firstAt time.Time
	pending int
	buf     []byte
}

// held is a fragment kept back by a delay fault until crossing due.
type held struct {
	due  uint64
	part int
	f    *pb.Fragment
}

// New returns an emulator that sends to sink the crossings gen makes for
// the given source ids, registering its metrics on reg.
func New(cfg Config, gen detector.Generator, sources []uint32, sink Sink, reg prometheus.Registerer) (*Emulator, error) {
	if err := cfg.fill(); err != nil {
		return nil, err
	}
	if len(sources) == 0 {
		return nil, errors.New("emulator: no sources")
	}
	inj, err := newInjector(cfg.Seed, cfg.Faults, sources)
	if err != nil {
		return nil, err
	}
	m, err := newMetrics(reg)
	if err != nil {
		return nil, err
	}
	e := &Emulator{cfg: cfg, sink: sink, gen: gen, sources: sources, m: m, inj: inj}
	e.batches = make([][]*pb.FragmentBatch, cfg.Partitions)
	e.firstTs = make([][]int64, cfg.Partitions)
	e.seq = make([][]uint64, cfg.Partitions)
	e.pool = make([][][]*pb.Fragment, cfg.Partitions)
	e.delayed = make([][]held, len(sources))
	for p := range e.batches {
		e.batches[p] = make([]*pb.FragmentBatch, len(sources))
		e.firstTs[p] = make([]int64, len(sources))
		e.seq[p] = make([]uint64, len(sources))
		e.pool[p] = make([][]*pb.Fragment, len(sources))
		for i, id := range sources {
			e.batches[p][i] = &pb.FragmentBatch{SourceId: id, Run: cfg.Run}
		}
	}
	return e, nil
}

// Offered returns the number of crossings generated so far.
func (e *Emulator) Offered() uint64 { return e.offered.Load() }

// FragmentsSent returns the number of fragments sent so far (duplicates
// count twice, dropped ones not at all).
func (e *Emulator) FragmentsSent() uint64 { return e.sent.Load() }

// Injected returns what the fault injector did. Call it after Run.
func (e *Emulator) Injected() InjectedCounts {
	if e.inj == nil {
		return InjectedCounts{}
	}
	return e.inj.counts
}

// Run generates and sends crossings until Config.Crossings are done or ctx
// ends, then sends what delay faults still hold, flushes its batches and
// sends every source's end-of-run marker. It returns nil after a clean end.
func (e *Emulator) Run(ctx context.Context) error {
	var c detector.Crossing
	start := time.Now()
	n := uint64(0)
	for ; e.cfg.Crossings == 0 || n < e.cfg.Crossings; n++ {
		if n%64 == 0 && ctx.Err() != nil {
			break
		}
		if e.cfg.RateHz > 0 {
			if err := e.pace(ctx, start, n); err != nil {
				break
			}
		}
		e.gen.Generate(n, &c)
		if err := e.add(&c); err != nil {
			return err
		}
		e.offered.Add(1)
		e.m.crossings.Inc()
	}
	if err := e.release(^uint64(0)); err != nil {
		return err
	}
	if err := e.flush(false); err != nil {
		return err
	}
	if err := e.flush(true); err != nil {
		return err
	}
	return e.sink.Flush()
}

// pace waits until crossing n is due at the offered rate, flushing batches
// that have waited too long meanwhile.
func (e *Emulator) pace(ctx context.Context, start time.Time, n uint64) error {
	due := start.Add(time.Duration(float64(n) / e.cfg.RateHz * 1e9))
	for {
		now := time.Now()
		if e.pending > 0 && now.Sub(e.firstAt) >= e.cfg.MaxBatchAge {
			if err := e.flush(false); err != nil {
				return err
			}
		}
		wait := due.Sub(now)
		if wait <= 0 {
			return nil
		}
		if e.pending > 0 {
			wait = min(wait, e.cfg.MaxBatchAge-now.Sub(e.firstAt))
		}
		t := time.NewTimer(max(wait, 50*time.Microsecond))
		select {
		case <-ctx.Done():
			t.Stop()
			return ctx.Err()
		case <-t.C:
		}
	}
}

func (e *Emulator) add(c *detector.Crossing) error {
	p := 0
	if e.cfg.Partitions > 1 {
		p = builder.Partition(c.Orbit, c.Bcid, e.cfg.Partitions)
	}
	if e.pending == 0 {
		e.firstAt = time.Now()
	}
	if err := e.release(c.N); err != nil {
		return err
	}
	for i, id := range e.sources {
		fault := e.inj.fault(id)
		if fault != nil && fault.StallTo > 0 && c.N >= fault.StallFrom && c.N < fault.StallTo {
			e.inj.counts.Stalled++
			continue
		}
		b := e.batches[p][i]
		f := e.fragment(p, i, len(b.Fragments))
		e.fill(f, c, id)
		if fault != nil {
			f.TimestampNs += fault.ClockSkewNs
			f.Seal()
			act, reorder := e.inj.decide(fault, c.N, id)
			switch act {
			case drop:
				e.inj.counts.Dropped++
				continue
			case delay:
				e.inj.counts.Delayed++
				e.delayed[i] = append(e.delayed[i], held{due: c.N + uint64(fault.DelayCrossings), part: p, f: proto.Clone(f).(*pb.Fragment)})
				continue
			case corrupt:
				e.inj.counts.Corrupted++
				corruptFragment(f)
			}
			if err := e.append(p, i, f, c.TimestampNs); err != nil {
				return err
			}
			if act == duplicate {
				e.inj.counts.Duplicated++
				// A copy: the batch may be sent in between, and the pooled
				// fragment reused for a later crossing.
				if err := e.append(p, i, proto.Clone(f).(*pb.Fragment), c.TimestampNs); err != nil {
					return err
				}
			}
			if reorder {
				if k := len(b.Fragments); k >= 2 {
					e.inj.counts.Reordered++
					b.Fragments[k-1], b.Fragments[k-2] = b.Fragments[k-2], b.Fragments[k-1]
				}
			}
			continue
		}
		f.Seal()
		if err := e.append(p, i, f, c.TimestampNs); err != nil {
			return err
		}
	}
	e.pending++
	return nil
}

// fill writes source id's share of crossing c into the reusable fragment f.
func (e *Emulator) fill(f *pb.Fragment, c *detector.Crossing, id uint32) {
	f.SourceId, f.Run, f.Orbit, f.Bcid, f.TimestampNs = id, e.cfg.Run, c.Orbit, c.Bcid, c.SourceTimestamp(id)
	f.Status = 0
	if p := e.cfg.Partition; p != nil {
		if pos, ok := p.MuonPosition(id); ok {
			fillMuon(f, c, pos)
			return
		}
	}
	k := int(id - 1)
	if k < len(c.Saturated) && c.Saturated[k] {
		f.Status |= uint32(pb.FragmentStatus_FRAGMENT_STATUS_SATURATED)
	}
	calo := f.GetCalo()
	if calo == nil {
		calo = &pb.CaloPayload{}
		f.Payload = &pb.Fragment_Calo{Calo: calo}
	}
	calo.Towers, calo.EtCounts = calo.Towers[:0], calo.EtCounts[:0]
	if k < len(c.PerSource) {
		for _, tc := range c.PerSource[k] {
			calo.Towers = append(calo.Towers, tc.Tower)
			calo.EtCounts = append(calo.EtCounts, tc.Counts)
		}
	}
}

// fillMuon writes the hits of the muon source at position pos into f,
// reusing its hit messages.
func fillMuon(f *pb.Fragment, c *detector.Crossing, pos int) {
	muon := f.GetMuon()
	if muon == nil {
		muon = &pb.MuonPayload{}
		f.Payload = &pb.Fragment_Muon{Muon: muon}
	}
	var hits []detector.MuonHit
	if pos < len(c.MuonHits) {
		hits = c.MuonHits[pos]
	}
	for len(muon.Hits) < len(hits) {
		muon.Hits = append(muon.Hits, &pb.MuonHit{})
	}
	muon.Hits = muon.Hits[:len(hits)]
	for i, h := range hits {
		muon.Hits[i].Station, muon.Hits[i].XMm, muon.Hits[i].YMm, muon.Hits[i].ZMm = uint32(h.Station), float32(h.X), float32(h.Y), float32(h.Z)
	}
}

// corruptFragment flips one bit after sealing, the way a bad link would:
// in a tower count when there is one, else in the checksum.
func corruptFragment(f *pb.Fragment) {
	if calo := f.GetCalo(); calo != nil && len(calo.EtCounts) > 0 {
		calo.EtCounts[0] ^= 1
		return
	}
	if muon := f.GetMuon(); muon != nil && len(muon.Hits) > 0 {
		muon.Hits[0].Station ^= 1
		return
	}
	f.Checksum ^= 1
}

// append adds f to its batch and sends the batch once it is full.
func (e *Emulator) append(p, i int, f *pb.Fragment, ts int64) error {
	b := e.batches[p][i]
	if len(b.Fragments) == 0 {
		e.firstTs[p][i] = ts
	}
	b.Fragments = append(b.Fragments, f)
	if len(b.Fragments) >= e.cfg.BatchCrossings {
		return e.publish(p, i, false)
	}
	return nil
}

// release sends the fragments that delay faults hold back and that are due
// by crossing n.
func (e *Emulator) release(n uint64) error {
	for i := range e.delayed {
		keep := e.delayed[i][:0]
		for _, h := range e.delayed[i] {
			if h.due > n {
				keep = append(keep, h)
				continue
			}
			if err := e.append(h.part, i, h.f, h.f.TimestampNs); err != nil {
				return err
			}
		}
		e.delayed[i] = keep
	}
	return nil
}

// fragment returns a reusable fragment for position k of a batch slot.
// Fragments held by a delay fault are clones, so reuse is safe.
func (e *Emulator) fragment(p, i, k int) *pb.Fragment {
	for len(e.pool[p][i]) <= k {
		e.pool[p][i] = append(e.pool[p][i], &pb.Fragment{Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{}}})
	}
	return e.pool[p][i][k]
}

func (e *Emulator) publish(p, i int, end bool) error {
	b := e.batches[p][i]
	b.Sequence = e.seq[p][i]
	b.SentUnixNs = time.Now().UnixNano()
	b.EndOfRun = end
	var err error
	e.buf, err = proto.MarshalOptions{}.MarshalAppend(e.buf[:0], b)
	if err != nil {
		return fmt.Errorf("emulator: encode batch of source %d: %w", b.SourceId, err)
	}
	if err := e.sink.Send(p, b.SourceId, e.firstTs[p][i], e.buf, len(b.Fragments)); err != nil {
		return err
	}
	e.seq[p][i]++
	e.sent.Add(uint64(len(b.Fragments)))
	e.m.fragments.Add(float64(len(b.Fragments)))
	e.m.bytes.Add(float64(len(e.buf)))
	e.m.batches.Inc()
	b.Fragments = b.Fragments[:0]
	return nil
}

// flush sends every partly filled batch; with end it sends every source's
// end-of-run marker to every builder share.
func (e *Emulator) flush(end bool) error {
	for p := range e.batches {
		for i := range e.sources {
			if end || len(e.batches[p][i].Fragments) > 0 {
				if err := e.publish(p, i, end); err != nil {
					return err
				}
			}
		}
	}
	e.pending = 0
	return nil
}
