package replay

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"reflect"
	"runtime"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// sequential decides a stream the plain way, one goroutine, with
// proto.Unmarshal, the builder, selector.FillEvent and the selection
// library's own Selector.Decide (prescales included): the reference the
// parallel replay must match event by event.
//
// Reading stops at the first damage of the file, as a replay's does.
func sequential(t *testing.T, path string, m *trigger.Menu) []decided {
	t.Helper()
	out, _, _ := sequentialRun(t, path, m)
	return out
}

// sequentialRun is sequential with the builder's accounting and the
// number of batches protobuf could not decode (skipped, as a replay
// skips them).
func sequentialRun(t *testing.T, path string, m *trigger.Menu) ([]decided, builder.Stats, int) {
	t.Helper()
	r, err := recording.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	h := r.Header()
	d := detector.DefaultDescription()
	g := d.Geometry
	sel, err := trigger.NewSelector(m, trigger.Grid{EtaBins: g.EtaBins, PhiBins: g.PhiBins, EtaMin: -g.EtaMax, EtaStep: g.EtaStep})
	if err != nil {
		t.Fatal(err)
	}
	var out []decided
	var ev trigger.Event
	var dec trigger.Decision
	undecodable := 0
	b, err := builder.New(builder.Config{Run: h.Run, Sources: h.SourceIds, WhenFull: builder.EvictOldest}, func(be *builder.Event) {
		selector.FillEvent(g, be.Fragments, uint32(be.Orbit/d.Config.LumiSliceOrbits)+1, &ev)
		sel.Decide(&ev, &dec)
		out = append(out, decided{orbit: be.Orbit, bcid: be.Bcid, flags: be.Flags, accept: dec.Accept,
			passed: append([]bool(nil), dec.Passed...), kept: append([]bool(nil), dec.Kept...)})
	})
	if err != nil {
		t.Fatal(err)
	}
	var arrival int64
	for {
		rb, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		var fe *recording.FormatError
		if errors.As(err, &fe) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		var batch pb.FragmentBatch
		if err := proto.Unmarshal(rb.Data, &batch); err != nil {
			undecodable++
			continue
		}
		for _, f := range batch.Fragments {
			arrival = max(arrival, f.TimestampNs)
			_ = b.Add(f, arrival, arrival)
		}
	}
	b.Flush()
	return out, b.Stats(), undecodable
}

// sameDecisions fails t at the first event whose crossing, flags or
// decisions differ between got and want, which have the same length.
func sameDecisions(t *testing.T, what string, got, want []decided) {
	t.Helper()
	for i := range got {
		g, w := got[i], want[i]
		if g.orbit != w.orbit || g.bcid != w.bcid || g.flags != w.flags || g.accept != w.accept ||
			!reflect.DeepEqual(g.passed, w.passed) || !reflect.DeepEqual(g.kept, w.kept) {
			t.Fatalf("%s, event %d: replay %+v, sequential %+v", what, i, g, w)
		}
	}
}

// The parallel replay of a recorded stream, faults included, gives event
// for event the decisions of the plain sequential chain, for any number
// of workers and any chunk size.
func TestReplayMatchesSequentialSelection(t *testing.T) {
	gen, part := simpleGenerator(t, 3)
	path := recordStream(t, gen, part, 4000, false,
		emulator.Fault{Sources: []uint32{2, 7}, Drop: 0.02, Duplicate: 0.02, Corrupt: 0.01})
	m := starterMenu(t)
	want := sequential(t, path, m)
	jets, _ := ParseQuantity("jets[0].et")
	for _, c := range []struct{ workers, chunk int }{{1, 256}, {2, 37}, {3, 1}} {
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: c.workers, ChunkEvents: c.chunk, Values: []Quantity{jets}})
		src.Close()
		if len(got) != len(want) || sum.Events != uint64(len(want)) {
			t.Fatalf("workers %d: %d events (summary %d), sequential %d", c.workers, len(got), sum.Events, len(want))
		}
		passes, kept := make([]int, len(m.Rules)), make([]int, len(m.Rules))
		for i := range got {
			g, w := got[i], want[i]
			if g.orbit != w.orbit || g.bcid != w.bcid || g.flags != w.flags || g.accept != w.accept ||
				!reflect.DeepEqual(g.passed, w.passed) || !reflect.DeepEqual(g.kept, w.kept) {
				t.Fatalf("workers %d, event %d: replay %+v, sequential %+v", c.workers, i, g, w)
			}
			for k := range g.kept {
				if g.passed[k] {
					passes[k]++
				}
				if g.kept[k] {
					kept[k]++
				}
			}
		}
		ps, _ := m.Prescales(m.ActiveSet)
		for k := range passes {
			if passes[k] == 0 || passes[k] >= ps[k] && kept[k] == 0 {
				t.Errorf("rule %s passed %d and kept %d: the sample does not exercise it", m.Rules[k].Name, passes[k], kept[k])
			}
		}
		if !sum.Builder.Balanced() || sum.Builder.Malformed == 0 || sum.Builder.Duplicate == 0 || sum.Builder.EventsIncomplete == 0 {
			t.Errorf("builder accounting %+v: want balanced, with the injected faults counted", sum.Builder)
		}
	}
}

// A generator source gives the same events for any number of generating
// and deciding workers, and every event carries its own crossing's truth.
func TestGeneratorSourceDeterministic(t *testing.T) {
	m := starterMenu(t)
	met, _ := ParseQuantity("met")
	var first []decided
	for _, w := range []int{1, 2, 3} {
		src, err := NewGeneratorSource(GeneratorConfig{Seed: 5, Crossings: 700, Workers: w,
			Generator: detector.GeneratorConfig{Simple: detector.SimpleConfig{DijetFraction: 0.2}}})
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: 4 - w, ChunkEvents: 50, Values: []Quantity{met}})
		if len(got) != 700 || sum.TruthMatched != 700 || sum.Builder.EventsComplete != 700 {
			t.Fatalf("%d events, %d with truth, summary %+v", len(got), sum.TruthMatched, sum)
		}
		for i, d := range got {
			orbit, bcid := src.Sample().Description.Filling.Crossing(uint64(i))
			if d.orbit != orbit || d.bcid != bcid || d.truthN != int64(i) || math.IsNaN(d.values[0]) {
				t.Fatalf("event %d: %+v, want crossing %d at orbit %d bcid %d", i, d, i, orbit, bcid)
			}
		}
		if first == nil {
			first = got
		} else if !reflect.DeepEqual(first, got) {
			t.Fatalf("workers %d: events differ from workers 1", w)
		}
	}
}

// Truth records of a stream reach the events of their crossings.
func TestStreamTruthReachesEvents(t *testing.T) {
	d := detector.DefaultDescription()
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewPhysicsGenerator(d, part, 4, detector.PhysicsConfig{Mu: 5, Force: "z-ee", LibraryEvents: 50})
	if err != nil {
		t.Fatal(err)
	}
	path := recordStream(t, gen, part, 300, true)
	src, err := OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	if !src.Sample().Truth || src.Sample().Kind != "stream" {
		t.Fatalf("sample %+v", src.Sample())
	}
	var weights []float64
	sum, err := Run(context.Background(), src, Config{Menus: []*trigger.Menu{starterMenu(t)}}, func(e *Event) error {
		if e.Truth == nil || e.Truth.Orbit != e.Orbit || e.Truth.Bcid != e.Bcid || e.Truth.Truth.Process != detector.ProcessZee {
			t.Fatalf("event %d (orbit %d bcid %d) has truth %+v", e.Seq, e.Orbit, e.Bcid, e.Truth)
		}
		weights = append(weights, e.Weight())
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if sum.TruthRecords != 300 || sum.TruthMatched != 300 || len(weights) != 300 {
		t.Fatalf("summary %+v", sum)
	}
	want := gen.ExpectedPerCrossing(detector.ProcessZee)
	for _, w := range weights {
		if w != want {
			t.Fatalf("weight %v, want the forced process's %v per crossing", w, want)
		}
	}
}

// A sink error stops the run and comes back.
func TestSinkErrorStops(t *testing.T) {
	src, err := NewGeneratorSource(GeneratorConfig{Seed: 1, Crossings: 5000})
	if err != nil {
		t.Fatal(err)
	}
	stop := errors.New("enough")
	n := 0
	_, err = Run(context.Background(), src, Config{Menus: []*trigger.Menu{starterMenu(t)}, ChunkEvents: 16}, func(*Event) error {
		n++
		if n == 100 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || n != 100 {
		t.Fatalf("err %v after %d events", err, n)
	}
}

// A stream damaged part way gives, for any number of workers, exactly the
// events of the sequential chain reading up to the damage, and says where
// reading stopped.
func TestDamagedStreamMatchesSequential(t *testing.T) {
	gen, part := simpleGenerator(t, 6)
	path := recordStream(t, gen, part, 3000, false)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	// Flip a byte in the second of the file's two batch frames (the
	// first holds 1 MiB): that frame fails its checksum.
	data[len(data)*4/5] ^= 0x40
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	m := starterMenu(t)
	want := sequential(t, path, m)
	if len(want) == 0 || len(want) >= 3000 {
		t.Fatalf("the sequential chain read %d events of 3000: the damage is not part way", len(want))
	}
	for _, w := range []int{1, 2, 3} {
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		got, sum := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: w})
		src.Close()
		if !strings.Contains(sum.InputError, "corrupted at byte offset") {
			t.Fatalf("workers %d: input error %q", w, sum.InputError)
		}
		if len(got) != len(want) {
			t.Fatalf("workers %d: %d events, the sequential chain %d", w, len(got), len(want))
		}
		sameDecisions(t, fmt.Sprintf("workers %d", w), got, want)
	}
}

// A sink error stops a stream replay too, and the reading and decoding
// goroutines end with the run.
func TestSinkErrorStopsStream(t *testing.T) {
	gen, part := simpleGenerator(t, 2)
	path := recordStream(t, gen, part, 3000, true)
	before := runtime.NumGoroutine()
	stop := errors.New("enough")
	for _, at := range []int{1, 100, 2500} {
		src, err := OpenStream(path)
		if err != nil {
			t.Fatal(err)
		}
		n := 0
		_, err = Run(context.Background(), src, Config{Menus: []*trigger.Menu{starterMenu(t)}, ChunkEvents: 16}, func(*Event) error {
			n++
			if n == at {
				return stop
			}
			return nil
		})
		src.Close()
		if !errors.Is(err, stop) || n != at {
			t.Fatalf("err %v after %d events, want the sink's error after %d", err, n, at)
		}
	}
	// Run joins its goroutines before it returns; poll in case the
	// runtime has not yet reaped them.
	deadline := time.Now().Add(5 * time.Second)
	for runtime.NumGoroutine() > before {
		if time.Now().After(deadline) {
			t.Fatalf("%d goroutines after the runs, %d before", runtime.NumGoroutine(), before)
		}
		runtime.Gosched()
	}
}

// A cancelled context stops a stream replay with the context's error.
func TestCancelStopsStream(t *testing.T) {
	gen, part := simpleGenerator(t, 2)
	path := recordStream(t, gen, part, 2000, false)
	src, err := OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	ctx, cancel := context.WithCancel(context.Background())
	n := 0
	_, err = Run(ctx, src, Config{Menus: []*trigger.Menu{starterMenu(t)}, ChunkEvents: 8}, func(*Event) error {
		if n++; n == 50 {
			cancel()
		}
		return nil
	})
	if !errors.Is(err, context.Canceled) || n >= 2000 {
		t.Fatalf("err %v after %d events", err, n)
	}
}

// A generated physics sample carries the muon sources the readout would
// have: replayed from the generator directly, and replayed from the same
// crossings written by the readout emulator into a stream, it gives event
// for event the decisions of the plain sequential chain on that stream;
// and the muon rules fire on forced Z -> mu mu crossings.
func TestGeneratedMuonsMatchRecordedReadout(t *testing.T) {
	const seed, crossings = 4, 160
	d := detector.DefaultDescription()
	gcfg := detector.GeneratorConfig{Kind: detector.GeneratorPhysics, Physics: detector.PhysicsConfig{Mu: 10, Force: "z-mumu", LibraryEvents: 60}}
	part, err := detector.NewPartition(d.Geometry, 16)
	if err != nil {
		t.Fatal(err)
	}
	gen, err := detector.NewGenerator(d, part, seed, gcfg)
	if err != nil {
		t.Fatal(err)
	}
	path := recordReadout(t, gen, part, crossings, 32)
	m := physicsMenu(t)
	want := sequential(t, path, m)

	src, err := NewGeneratorSource(GeneratorConfig{Seed: seed, Crossings: crossings, CaloSources: 16, Generator: gcfg})
	if err != nil {
		t.Fatal(err)
	}
	if n := len(src.Sample().Sources); n != len(part.AllSourceIDs()) {
		t.Fatalf("generated sample has %d sources, the readout %d", n, len(part.AllSourceIDs()))
	}
	generated, _ := collect(t, src, Config{Menus: []*trigger.Menu{m}, Workers: 2})
	stream, err := OpenStream(path)
	if err != nil {
		t.Fatal(err)
	}
	defer stream.Close()
	replayed, _ := collect(t, stream, Config{Menus: []*trigger.Menu{m}, Workers: 2})
	dimuon := m.RuleIndex("dimuon-z")
	fired := 0
	for name, got := range map[string][]decided{"generated": generated, "replayed stream": replayed} {
		if len(got) != len(want) || len(got) != crossings {
			t.Fatalf("%d %s events, %d decided sequentially, want %d", len(got), name, len(want), crossings)
		}
		for i := range got {
			g, w := got[i], want[i]
			if g.orbit != w.orbit || g.bcid != w.bcid || g.accept != w.accept || !reflect.DeepEqual(g.passed, w.passed) {
				t.Fatalf("event %d: %s %+v, sequential %+v", i, name, g, w)
			}
		}
	}
	for _, g := range generated {
		if g.passed[dimuon] {
			fired++
		}
	}
	// Most forced Z -> mu mu crossings have both muons in the stations
	// and above the rule's thresholds.
	if fired < crossings/4 {
		t.Fatalf("dimuon-z passed %d of %d forced Z -> mu mu crossings", fired, crossings)
	}
}
