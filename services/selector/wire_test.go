package selector

import (
	"context"
	"fmt"
	"io/fs"
	"math"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/examples"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// sampleEvents returns n toy-generator crossings of 16 sources as built
// events, in batches of per events, encoded by proto.Marshal. Every
// muonEvery-th event also carries a muon sector's fragment (0: none).
func sampleEvents(tb testing.TB, n, per, muonEvery int) [][]byte {
	tb.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		tb.Fatal(err)
	}
	gen, err := detector.NewSimpleGenerator(d, part, 9, detector.SimpleConfig{DijetFraction: 0.2})
	if err != nil {
		tb.Fatal(err)
	}
	return sampleEventsOf(tb, gen, n, per, muonEvery)
}

// samplePhysicsEvents is sampleEvents for crossings of the physics
// generator at mu = 60 (about 980 towers each, no muon fragments).
func samplePhysicsEvents(tb testing.TB, n, per int) [][]byte {
	tb.Helper()
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		tb.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 9, detector.PhysicsConfig{Mu: 60, LibraryEvents: 200})
	if err != nil {
		tb.Fatal(err)
	}
	return sampleEventsOf(tb, gen, n, per, 0)
}

// sampleEventsOf is sampleEvents with the crossings of gen.
func sampleEventsOf(tb testing.TB, gen detector.Generator, n, per, muonEvery int) [][]byte {
	var out [][]byte
	var c detector.Crossing
	batch := &pb.EventBatch{Builder: 0}
	for i := 0; i < n; i++ {
		gen.Generate(uint64(i), &c)
		be := &pb.BuiltEvent{Run: 1, Orbit: c.Orbit, Bcid: c.Bcid, TimestampNs: c.TimestampNs, LumiSlice: uint32(i/500) + 1,
			ReadoutUnixNs: time.Now().UnixNano(), BuiltUnixNs: time.Now().UnixNano()}
		for s, towers := range c.PerSource {
			calo := &pb.CaloPayload{}
			for _, tc := range towers {
				calo.Towers = append(calo.Towers, tc.Tower)
				calo.EtCounts = append(calo.EtCounts, tc.Counts)
			}
			f := &pb.Fragment{SourceId: uint32(s + 1), Run: 1, Orbit: c.Orbit, Bcid: c.Bcid, TimestampNs: c.TimestampNs, Payload: &pb.Fragment_Calo{Calo: calo}}
			f.Seal()
			be.Fragments = append(be.Fragments, f)
		}
		if muonEvery > 0 && i%muonEvery == muonEvery-1 {
			hits := []*pb.MuonHit{{Station: 0, XMm: 1200.5, YMm: -30, ZMm: 88}, {Station: 2, XMm: 4100, YMm: -95.25, ZMm: 301}}
			f := &pb.Fragment{SourceId: 17, Run: 1, Orbit: c.Orbit, Bcid: c.Bcid, TimestampNs: c.TimestampNs, Payload: &pb.Fragment_Muon{Muon: &pb.MuonPayload{Hits: hits}}}
			f.Seal()
			be.Fragments = append(be.Fragments, f)
		}
		batch.Events = append(batch.Events, be)
		if len(batch.Events) == per || i == n-1 {
			data, err := proto.Marshal(batch)
			if err != nil {
				tb.Fatal(err)
			}
			out = append(out, data)
			batch.Events = nil
			batch.Sequence++
		}
	}
	return out
}

// referenceEvents decodes a batch with proto.Unmarshal and FillEvent, the
// reference path; ok is false when proto refuses the bytes.
func referenceEvents(g *detector.Geometry, data []byte) ([]trigger.Event, bool) {
	var b pb.EventBatch
	if proto.Unmarshal(data, &b) != nil {
		return nil, false
	}
	var out []trigger.Event
	for _, be := range b.Events {
		var ev trigger.Event
		FillEvent(g, be.Fragments, be.LumiSlice, &ev)
		out = append(out, ev)
	}
	return out, true
}

// wireEvents decodes a batch on the wire path; events it leaves to the
// reference path are nil.
func wireEvents(tab *towerTable, data []byte) ([]*trigger.Event, error) {
	var we wireEvent
	var sc wireFill
	var out []*trigger.Event
	_, err := walkBatch(data, func(raw []byte) error {
		if err := we.decode(raw); err != nil {
			return err
		}
		ev := &trigger.Event{}
		ok, err := tab.fillWire(we.frags, we.lumi, ev, &sc)
		if err != nil {
			return err
		}
		if !ok {
			ev = nil
		}
		out = append(out, ev)
		return nil
	})
	return out, err
}

// sameEvent reports whether the wire path's event equals the reference's
// (an empty slice and a nil one are the same; hit coordinates compare by
// their bits, so that NaN equals NaN).
func sameEvent(got *trigger.Event, want trigger.Event) bool {
	sameHit := func(a, b trigger.MuonHit) bool {
		bits := math.Float64bits
		return a.Station == b.Station && bits(a.X) == bits(b.X) && bits(a.Y) == bits(b.Y) && bits(a.Z) == bits(b.Z)
	}
	return got.LumiSlice == want.LumiSlice && slices.Equal(got.Towers, want.Towers) && slices.Equal(gridTowersOf(got), gridTowersOf(&want)) &&
		slices.EqualFunc(got.MuonHits, want.MuonHits, sameHit)
}

// gridTowersOf returns ev's GridTowers followed by its counted towers as
// GridTowers, in the event's order.
func gridTowersOf(ev *trigger.Event) []trigger.GridTower {
	return ev.Counted.AppendGridTowers(slices.Clone(ev.GridTowers))
}

// The wire path gives exactly FillEvent's towers and muon hits (FillEvent
// after proto.Unmarshal, google.golang.org/protobuf's reference decoder,
// is the reference) for every event.
func TestFillWireMatchesFillEvent(t *testing.T) {
	g := detector.Lantern()
	hits := 0
	for _, data := range sampleEvents(t, 400, 64, 3) {
		want, ok := referenceEvents(g, data)
		if !ok {
			t.Fatal("proto refuses the sample")
		}
		got, err := wireEvents(newTowerTable(g), data)
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != len(want) {
			t.Fatalf("%d events, want %d", len(got), len(want))
		}
		for i := range want {
			if len(want[i].GridTowers) == 0 || len(want[i].Towers) != 0 {
				t.Fatalf("event %d has no grid towers, or plain ones: the sample does not exercise the decoder", i)
			}
			if got[i] == nil {
				t.Fatalf("event %d left to the reference path", i)
			}
			if len(got[i].Counted.Words) == 0 || len(got[i].GridTowers) != 0 {
				t.Fatalf("event %d: %d counted towers, %d grid towers: the readout's layout should give words only", i, len(got[i].Counted.Words), len(got[i].GridTowers))
			}
			if !sameEvent(got[i], want[i]) {
				t.Fatalf("event %d differs\n got %+v\nwant %+v", i, *got[i], want[i])
			}
			hits += len(want[i].MuonHits)
		}
	}
	if hits == 0 {
		t.Fatal("no muon hits: the sample does not exercise the muon decoder")
	}
}

// Protobuf encodings by hand (google.golang.org/protobuf/encoding/protowire),
// for layouts the readout does not write.
func field(num protowire.Number, x uint64) []byte {
	return protowire.AppendVarint(protowire.AppendTag(nil, num, protowire.VarintType), x)
}

func fixed(num protowire.Number, x float32) []byte {
	return protowire.AppendFixed32(protowire.AppendTag(nil, num, protowire.Fixed32Type), math.Float32bits(x))
}

func bytesField(num protowire.Number, x []byte) []byte {
	return protowire.AppendBytes(protowire.AppendTag(nil, num, protowire.BytesType), x)
}

func packed(xs ...uint64) []byte {
	var b []byte
	for _, x := range xs {
		b = protowire.AppendVarint(b, x)
	}
	return b
}

func cat(parts ...[]byte) []byte { return slices.Concat(parts...) }

// Fragment layouts other than the builder's own decode with proto's
// meaning, or go to the reference path.
func TestFillWireOtherLayouts(t *testing.T) {
	g := detector.Lantern()
	calo := cat(bytesField(1, packed(5, 300, 7, 99999)), bytesField(2, packed(4, 0, 70000)))
	hit := cat(field(1, 2), fixed(2, -1.5), fixed(3, 1e6), fixed(4, float32(math.Copysign(0, -1))))
	cases := map[string]struct {
		frag []byte
		wire bool // decoded on the wire path, not left to the reference
	}{
		"canonical":        {cat(field(1, 2), bytesField(7, calo), field(9, 5)), true},
		"unpacked":         {cat(bytesField(7, cat(field(1, 5), field(2, 9), field(1, 6), field(2, 3)))), true},
		"calo twice":       {cat(bytesField(7, calo), bytesField(7, cat(bytesField(1, packed(8)), bytesField(2, packed(2))))), true},
		"unknown fields":   {cat(field(12, 1), bytesField(7, cat(field(9, 1), calo)), bytesField(13, []byte("z"))), true},
		"wrong type":       {cat(field(7, 1), bytesField(7, calo)), true},
		"more counts":      {cat(bytesField(7, cat(bytesField(1, packed(1)), bytesField(2, packed(3, 4, 5))))), true},
		"muon":             {cat(field(1, 17), bytesField(8, cat(bytesField(1, hit), bytesField(1, nil), bytesField(1, field(1, 3))))), true},
		"empty muon":       {cat(bytesField(8, nil)), true},
		"muon, station x2": {cat(bytesField(8, bytesField(1, cat(field(1, 2), field(1, 4))))), true},
		"muon, odd hit":    {cat(bytesField(8, bytesField(1, cat(field(1, 2), field(9, 4))))), false},
		"calo then muon":   {cat(bytesField(7, calo), bytesField(8, bytesField(1, hit))), false},
		"muon then calo":   {cat(bytesField(8, bytesField(1, hit)), bytesField(7, calo)), false},
		"muon wrong type":  {cat(field(8, 1), bytesField(7, calo)), true},
	}
	for name, c := range cases {
		t.Run(name, func(t *testing.T) {
			ev := cat(field(1, 1), field(5, 3), bytesField(6, c.frag), bytesField(6, c.frag))
			data := cat(field(1, 0), bytesField(3, ev), bytesField(15, nil), bytesField(3, ev))
			want, ok := referenceEvents(g, data)
			if !ok {
				t.Fatal("proto refuses the case")
			}
			got, err := wireEvents(newTowerTable(g), data)
			if err != nil {
				t.Fatal(err)
			}
			for i := range want {
				if got[i] == nil {
					if c.wire {
						t.Fatal("left to the reference path")
					}
					continue
				}
				if !c.wire {
					t.Fatal("decoded on the wire path, want the reference path")
				}
				if !sameEvent(got[i], want[i]) || got[i].LumiSlice != 3 {
					t.Fatalf("event differs\n got %+v\nwant %+v", *got[i], want[i])
				}
			}
		})
	}
}

// An event whose fragments mix the readout's layout with others keeps its
// towers in fragment order, as FillEvent does (the features' sums depend
// on the order): words turn into GridTowers at the first fragment the
// words cannot take, whichever comes first.
func TestFillWireMixedLayouts(t *testing.T) {
	g := detector.Lantern()
	canonical := func(towers, counts []byte) []byte {
		return bytesField(7, cat(bytesField(1, towers), bytesField(2, counts)))
	}
	a := canonical(packed(300, 301, 302, 303, 304), packed(5, 6, 7, 8, 9))
	b := canonical(packed(9000, 9001), packed(1, 2))
	unpacked := bytesField(7, cat(field(1, 500), field(2, 3), field(1, 501), field(2, 4)))
	wide := canonical(packed(700, 701), packed(70000, 2)) // a count beyond 16 bits
	muon := bytesField(8, nil)
	for name, frags := range map[string][][]byte{
		"words only":            {a, muon, b},
		"unpacked in between":   {a, unpacked, b},
		"unpacked first":        {unpacked, a, b},
		"unpacked last":         {a, b, unpacked},
		"wide count in between": {a, wide, b},
		"wide count first":      {wide, a},
	} {
		t.Run(name, func(t *testing.T) {
			ev := cat(field(1, 1), field(5, 3))
			for _, f := range frags {
				ev = cat(ev, bytesField(6, f))
			}
			data := cat(field(1, 0), bytesField(3, ev))
			want, ok := referenceEvents(g, data)
			if !ok {
				t.Fatal("proto refuses the case")
			}
			got, err := wireEvents(newTowerTable(g), data)
			if err != nil || len(got) != 1 || got[0] == nil {
				t.Fatalf("wire path: %v, %v", got, err)
			}
			if !sameEvent(got[0], want[0]) {
				t.Fatalf("event differs\n got %v\nwant %v", gridTowersOf(got[0]), gridTowersOf(&want[0]))
			}
			if words := len(got[0].Counted.Words) > 0; words != (name == "words only") {
				t.Fatalf("%d counted towers, %d grid towers", len(got[0].Counted.Words), len(got[0].GridTowers))
			}
		})
	}
}

// The reference path's fragment decoder gives proto.Unmarshal's fragments
// (google.golang.org/protobuf, the reference decoder), layouts other than
// the builder's included.
func TestSlabMatchesProto(t *testing.T) {
	var frags [][]byte
	for _, data := range sampleEvents(t, 30, 30, 3) {
		var b pb.EventBatch
		if err := proto.Unmarshal(data, &b); err != nil {
			t.Fatal(err)
		}
		for _, be := range b.Events {
			for _, f := range be.Fragments {
				raw, _ := proto.Marshal(f)
				frags = append(frags, raw)
			}
		}
	}
	calo := slices.Concat(bytesField(1, []byte{5, 6}), bytesField(2, []byte{1, 2}))
	frags = append(frags,
		slices.Concat(field(1, 3), bytesField(7, calo), bytesField(7, calo)),
		slices.Concat(field(1, 3), bytesField(7, slices.Concat(field(1, 5), field(2, 7)))),
		slices.Concat(field(15, 3), bytesField(7, calo)),
		nil,
	)
	var slab fragmentSlab
	// Twice, so that reused messages are checked as well as fresh ones.
	for round := 0; round < 2; round++ {
		got, err := slab.decode(frags)
		if err != nil {
			t.Fatal(err)
		}
		muons := 0
		for i, raw := range frags {
			var want pb.Fragment
			if err := proto.Unmarshal(raw, &want); err != nil {
				t.Fatal(err)
			}
			if !proto.Equal(got[i], &want) {
				t.Fatalf("fragment %d: got %v, want %v", i, got[i], &want)
			}
			if want.GetMuon() != nil {
				muons++
			}
		}
		if muons == 0 {
			t.Fatal("no muon fragment in the sample")
		}
	}
}

// FuzzFillWire: whatever proto decodes, the wire path decodes to the same
// event (or leaves to the reference path); it never panics.
func FuzzFillWire(f *testing.F) {
	for _, data := range sampleEvents(f, 6, 1, 3) {
		f.Add(data)
	}
	g := detector.Lantern()
	tab := newTowerTable(g)
	f.Fuzz(func(t *testing.T, data []byte) {
		want, ok := referenceEvents(g, data)
		got, err := wireEvents(tab, data)
		if !ok {
			return
		}
		if err != nil {
			t.Fatalf("proto decodes the batch, the wire path fails: %v", err)
		}
		for i := range want {
			if got[i] != nil && !sameEvent(got[i], want[i]) {
				t.Fatalf("event %d differs", i)
			}
		}
	})
}

func newTestSelector(t testing.TB, nc *nats.Conn, cfg Config) *Selector {
	t.Helper()
	data, err := fs.ReadFile(examples.FS, examples.StarterMenu)
	if err != nil {
		t.Fatal(err)
	}
	m, err := trigger.ParseMenu("starter.yaml", data)
	if err != nil {
		t.Fatal(err)
	}
	cfg.Menu, cfg.Geometry = m, detector.Lantern()
	s, err := New(cfg, nc, prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// A batch decided through the wire path gives the decisions of the same
// events decided one by one after proto.Unmarshal.
func TestWireDecisionsMatchProtoPath(t *testing.T) {
	big := Config{BatchDecisions: 1 << 30}
	wire, ref := newTestSelector(t, nil, big), newTestSelector(t, nil, big)
	for _, data := range sampleEvents(t, 600, 50, 3) {
		wire.mu.Lock()
		if _, err := walkBatch(data, wire.decideWire); err != nil {
			t.Fatal(err)
		}
		wire.mu.Unlock()
		var b pb.EventBatch
		if err := proto.Unmarshal(data, &b); err != nil {
			t.Fatal(err)
		}
		ref.mu.Lock()
		for _, be := range b.Events {
			ref.decide(be)
		}
		ref.mu.Unlock()
	}
	if len(wire.out.Decisions) != 600 || len(ref.out.Decisions) != 600 {
		t.Fatalf("%d and %d decisions, want 600", len(wire.out.Decisions), len(ref.out.Decisions))
	}
	passed := 0
	for i, d := range wire.out.Decisions {
		if !proto.Equal(d, ref.out.Decisions[i]) {
			t.Fatalf("decision %d differs:\n wire %v\n  ref %v", i, d, ref.out.Decisions[i])
		}
		passed += len(d.Rules)
	}
	if passed == 0 {
		t.Fatal("no rule passed: the sample does not exercise the menu")
	}
	if !slices.Equal(wire.Counts(), ref.Counts()) {
		t.Fatalf("rule counts differ: %v and %v", wire.Counts(), ref.Counts())
	}
}

// A decision reused after its batch was published carries nothing of the
// event it was used for before.
func TestReusedDecisionsAreClean(t *testing.T) {
	nc := embeddedSelectorConn(t)
	var mu sync.Mutex
	var got []*pb.Decision
	sub, err := nc.Subscribe(transport.Subjects{}.Decisions(), func(m *nats.Msg) {
		var b pb.DecisionBatch
		if err := proto.Unmarshal(m.Data, &b); err != nil {
			t.Error(err)
		}
		mu.Lock()
		got = append(got, b.Decisions...)
		mu.Unlock()
	})
	if err != nil {
		t.Fatal(err)
	}
	defer sub.Unsubscribe()
	s := newTestSelector(t, nc, Config{BatchDecisions: 7})
	ref := newTestSelector(t, nil, Config{BatchDecisions: 1 << 30})
	for _, data := range sampleEvents(t, 300, 30, 3) {
		s.onMsg(&nats.Msg{Data: data})
		var b pb.EventBatch
		_ = proto.Unmarshal(data, &b)
		ref.mu.Lock()
		for _, be := range b.Events {
			ref.decide(be)
		}
		ref.mu.Unlock()
	}
	s.mu.Lock()
	_ = s.publishLocked()
	s.mu.Unlock()
	_ = nc.Flush()
	deadline := time.Now().Add(5 * time.Second)
	for {
		mu.Lock()
		n := len(got)
		mu.Unlock()
		if n >= 300 || time.Now().After(deadline) {
			break
		}
		time.Sleep(2 * time.Millisecond)
	}
	mu.Lock()
	defer mu.Unlock()
	if len(got) != 300 {
		t.Fatalf("%d decisions published, want 300", len(got))
	}
	for i, d := range got {
		if !proto.Equal(d, ref.out.Decisions[i]) {
			t.Fatalf("decision %d: published %v, want %v", i, d, ref.out.Decisions[i])
		}
	}
}

// Several workers in one queue group end together once all of them have
// decided every event the builders emitted, although the queue group hands
// each builder's end-of-run batch to one worker only.
func TestWorkersEndTogether(t *testing.T) {
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	conn := func() *nats.Conn {
		nc, err := transport.ConnectInProcess(srv, "t")
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(nc.Close)
		return nc
	}
	for _, workers := range []int{1, 3} {
		t.Run(fmt.Sprint(workers, " workers"), func(t *testing.T) {
			subjects := transport.Subjects{Prefix: fmt.Sprintf("w%d", workers)}
			sels := make([]*Selector, workers)
			done := make(chan error, workers)
			for w := range sels {
				sels[w] = newTestSelector(t, conn(), Config{Worker: w, Workers: workers, Builders: 2, Subjects: subjects})
				go func() { done <- sels[w].Run(context.Background()) }()
				<-sels[w].Ready()
			}
			pub := conn()
			batches := sampleEvents(t, 240, 10, 3)
			perBuilder := map[uint32]uint64{}
			for i, data := range batches {
				// Two builders: alternate batches, rewriting the builder field.
				var b pb.EventBatch
				_ = proto.Unmarshal(data, &b)
				b.Builder = uint32(i % 2)
				perBuilder[b.Builder] += uint64(len(b.Events))
				out, _ := proto.Marshal(&b)
				if err := pub.Publish(subjects.Built(), out); err != nil {
					t.Fatal(err)
				}
			}
			for k := uint32(0); k < 2; k++ {
				end, _ := proto.Marshal(&pb.EventBatch{Builder: k, EndOfRun: true, EventsTotal: perBuilder[k]})
				if err := pub.Publish(subjects.Built(), end); err != nil {
					t.Fatal(err)
				}
				if err := pub.Publish(subjects.BuiltEnd(), end); err != nil {
					t.Fatal(err)
				}
			}
			for range sels {
				select {
				case err := <-done:
					if err != nil {
						t.Fatal(err)
					}
				case <-time.After(10 * time.Second):
					t.Fatal("workers did not end")
				}
			}
			var total uint64
			for _, s := range sels {
				total += s.Events()
			}
			if total != 240 {
				t.Fatalf("workers decided %d events together, want 240", total)
			}
		})
	}
}

// BenchmarkSelectBatch runs the selection's message handler on batches of
// 64 built events: decoding, features, the starter menu and the decisions,
// published to an in-process NATS server with no subscriber. "calo" events
// have the toy generator's 16 calorimeter fragments; "calo+muon" events
// also a muon fragment, which sends them through FillEvent.
func BenchmarkSelectBatch(b *testing.B) {
	for _, c := range []struct {
		name      string
		muonEvery int
	}{{"calo", 0}, {"calo+muon", 1}} {
		b.Run(c.name, func(b *testing.B) { benchmarkSelectBatch(b, c.muonEvery) })
	}
}

func benchmarkSelectBatch(b *testing.B, muonEvery int) {
	batches := sampleEvents(b, 6400, 64, muonEvery)
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
	s := newTestSelector(b, nc, Config{})
	b.ReportAllocs()
	events := 0
	c0 := cpuTime()
	for i := 0; b.Loop(); i++ {
		s.onMsg(&nats.Msg{Data: batches[i%len(batches)]})
		events += 64
	}
	b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(float64((cpuTime()-c0).Nanoseconds())/1e3/float64(events), "cpu-us/event")
}

// BenchmarkFill compares the wire path with proto.Unmarshal and FillEvent
// on the same batches.
func BenchmarkFill(b *testing.B) {
	g := detector.Lantern()
	b.Run("wire", func(b *testing.B) { benchmarkFillWire(b, g, sampleEvents(b, 6400, 64, 0)) })
	b.Run("wire-mu60", func(b *testing.B) { benchmarkFillWire(b, g, samplePhysicsEvents(b, 640, 64)) })
	batches := sampleEvents(b, 6400, 64, 0)
	b.Run("proto", func(b *testing.B) {
		var ev trigger.Event
		b.ReportAllocs()
		events := 0
		c0 := cpuTime()
		for i := 0; b.Loop(); i++ {
			var eb pb.EventBatch
			if err := proto.Unmarshal(batches[i%len(batches)], &eb); err != nil {
				b.Fatal(err)
			}
			for _, be := range eb.Events {
				FillEvent(g, be.Fragments, be.LumiSlice, &ev)
				events++
			}
		}
		b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
		b.ReportMetric(float64((cpuTime()-c0).Nanoseconds())/1e3/float64(events), "cpu-us/event")
	})
}

// benchmarkFillWire fills the events of batches on the wire path.
func benchmarkFillWire(b *testing.B, g *detector.Geometry, batches [][]byte) {
	tab := newTowerTable(g)
	var we wireEvent
	var sc wireFill
	var ev trigger.Event
	b.ReportAllocs()
	events := 0
	c0 := cpuTime()
	for i := 0; b.Loop(); i++ {
		_, err := walkBatch(batches[i%len(batches)], func(raw []byte) error {
			if err := we.decode(raw); err != nil {
				return err
			}
			_, err := tab.fillWire(we.frags, we.lumi, &ev, &sc)
			events++
			return err
		})
		if err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(float64((cpuTime()-c0).Nanoseconds())/1e3/float64(events), "cpu-us/event")
}

// The selection fills GridTowers, which stand for Towers at the centres
// of trigger.Grid's cells: the geometry's tower centres must be those
// centres bit for bit, or the features would move. Both compute
// -EtaMax + (i+0.5)*EtaStep and -pi + (i+0.5)*2pi/PhiBins; this holds them
// to it for the default geometry.
func TestGridCentresAreGeometryCentres(t *testing.T) {
	g := detector.Lantern()
	grid := GridOf(g)
	if !gridForm(g) {
		t.Fatal("the default geometry does not fit GridTowers")
	}
	for i := range g.EtaBins {
		if a, b := grid.EtaCentre(i), g.EtaCentre(i); math.Float64bits(a) != math.Float64bits(b) {
			t.Fatalf("eta row %d: grid centre %v, geometry %v", i, a, b)
		}
	}
	for i := range g.PhiBins {
		if a, b := grid.PhiCentre(i), g.PhiCentre(i); math.Float64bits(a) != math.Float64bits(b) {
			t.Fatalf("phi column %d: grid centre %v, geometry %v", i, a, b)
		}
	}
	// And a tower read back as the Tower it stands for has the geometry's
	// own coordinates.
	ev := trigger.Event{GridTowers: []trigger.GridTower{{ET: 3, IEta: 17, IPhi: 40, Layer: 1}}}
	tw := ev.TowerAt(0, grid)
	if tw.Eta != g.EtaCentre(17) || tw.Phi != g.PhiCentre(40) || tw.IEta != 17 || tw.IPhi != 40 || tw.Layer != 1 || tw.ET != 3 {
		t.Fatalf("tower %+v", tw)
	}
}

// FillEvent, the reference path, takes over an event the wire path filled
// before (the selection reuses one): no counted tower of the earlier event
// may stay in it.
func TestFillEventClearsCountedTowers(t *testing.T) {
	g := detector.Lantern()
	ev := trigger.Event{Counted: trigger.CountTowers{Words: []uint32{300 | 5<<16}, Cells: newTowerTable(g).cells, GeVPerCount: g.LeastCountGeV}}
	f := &pb.Fragment{Payload: &pb.Fragment_Calo{Calo: &pb.CaloPayload{Towers: []uint32{301}, EtCounts: []uint32{7}}}}
	FillEvent(g, []*pb.Fragment{f}, 1, &ev)
	if n := ev.NumTowers(); n != 1 || len(ev.GridTowers) != 1 {
		t.Fatalf("%d towers (%d counted), want the one tower of the fragment", n, len(ev.Counted.Words))
	}
}
