package loadtest

import (
	"context"
	"encoding/json"
	"image/png"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	"github.com/bunchsieve/bunchsieve/internal/syncbuf"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

// The harness end to end on an embedded server: a fixed-rate step longer
// than the dataset (so restamped laps go through the builder), a step as
// fast as possible and both baselines, then the report as JSON and PNG.
// It checks the accounting, not the speed.
// testRig generates a toy dataset of cfg and starts an embedded server
// for it, closed when the test ends.
func testRig(t *testing.T, cfg GenerateConfig) (*Dataset, *Network) {
	t.Helper()
	ds, err := Generate(cfg)
	if err != nil {
		t.Fatal(err)
	}
	nw, err := Embedded()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nw.Close)
	return ds, nw
}

func TestHarnessEndToEnd(t *testing.T) {
	ds, nw := testRig(t, GenerateConfig{Crossings: 1500, Seed: 1})
	// The progress lines and the instrumentation hook write into one log,
	// so that the hook's place among the phases can be checked.
	log := &syncbuf.Buffer{}
	rep, err := Run(context.Background(), Config{
		Dataset: ds, Origin: "test", Network: nw, Workers: 2, Rates: []float64{3000, 0}, Duration: time.Second,
		BaselineRuns: 1, BaselineLength: 100 * time.Millisecond, KeepMemory: true, MemoryEvery: 50 * time.Millisecond,
		Progress: log,
		Instrument: func() (func(), error) {
			log.Write([]byte("\n<instrument>\n"))
			return func() { log.Write([]byte("\n</instrument>\n")) }, nil
		},
	})
	if err != nil {
		t.Fatal(err)
	}
	// What the hook starts sees both steps and nothing else: not the
	// warm-up, not the baselines.
	text := log.String()
	on, off := strings.Index(text, "<instrument>"), strings.Index(text, "</instrument>")
	if on < 0 || off < on || strings.Count(text, "instrument>") != 2 {
		t.Fatalf("instrumentation hook not called once around the steps:\n%s", text)
	}
	for _, phase := range []struct {
		name   string
		inside bool
	}{{"warm-up at", false}, {"step 1 at", true}, {"step 2 at", true}, {"raw transport", false}} {
		i, j := strings.Index(text, phase.name), strings.LastIndex(text, phase.name)
		if i < 0 {
			t.Fatalf("no progress line %q:\n%s", phase.name, text)
		}
		if in := i > on && j < off; in != phase.inside || (!in && i < off && j > on) {
			t.Errorf("progress %q at %d..%d, instrumented %d..%d: want inside = %v", phase.name, i, j, on, off, phase.inside)
		}
	}
	if len(rep.Steps) != 2 || rep.Steps[0].OfferedHz != 0 || rep.Steps[1].OfferedHz != 3000 {
		t.Fatalf("steps %+v, want the unpaced step first, then 3000/s", rep.Steps)
	}
	for _, st := range rep.Steps {
		a := st.Account
		if !a.Lossless() || st.Error != "" {
			t.Fatalf("step at %v/s: accounting %+v, error %q", st.OfferedHz, a, st.Error)
		}
		if st.Latency.Count != a.EventsDecided || st.Latency.P99 <= 0 || st.Latency.P50 > st.Latency.P99 || st.Latency.P99 > st.Latency.P999 {
			t.Fatalf("step at %v/s: latency %+v for %d events", st.OfferedHz, st.Latency, a.EventsDecided)
		}
		// Linux splits CPU time into user and system by samples, so over a
		// short step either part alone may not move; their sum does.
		if st.EventsPerS <= 0 || st.CPU.UserS+st.CPU.SysS <= 0 || st.Memory.PeakHeapBytes == 0 || len(st.Memory.Samples) == 0 {
			t.Fatalf("step at %v/s: throughput, CPU or memory missing: %+v", st.OfferedHz, st)
		}
		passed := uint64(0)
		for _, r := range a.Rules {
			passed += r.Passed
		}
		if len(a.Rules) == 0 || passed == 0 {
			t.Fatalf("step at %v/s: no rule counts", st.OfferedHz)
		}
	}
	paced := rep.Steps[1]
	if paced.Laps != 2 || paced.Account.CrossingsOffered != 3000 || paced.Account.FragmentsOffered != 3000*16 {
		t.Fatalf("paced step: %d laps, %d crossings, %d fragments; want 2 laps of the 1500-crossing dataset", paced.Laps, paced.Account.CrossingsOffered, paced.Account.FragmentsOffered)
	}
	if d := paced.Account.FragmentsDiscarded; d != 0 {
		t.Fatalf("%d fragments of the restamped lap discarded (late, duplicate or malformed)", d)
	}
	for _, b := range []*Baseline{rep.Baseline, rep.Relay} {
		if b == nil || b.CrossingsPerS <= 0 || b.Dropped != 0 || b.Crossings < ds.Crossings {
			t.Fatalf("baseline %+v", b)
		}
	}
	if rep.Relay.Hops != 2 || rep.Baseline.Hops != 1 {
		t.Fatalf("baseline hops %d and %d", rep.Baseline.Hops, rep.Relay.Hops)
	}

	dir := t.TempDir()
	path := filepath.Join(dir, "report.json")
	if err := rep.WriteJSON(path); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var back Report
	if err := json.Unmarshal(data, &back); err != nil {
		t.Fatal(err)
	}
	if back.Schema != SchemaVersion || len(back.Steps) != 2 {
		t.Fatalf("JSON round trip lost fields: %+v", back)
	}
	if back.Steps[1].Account.EventsDecided != 3000 || back.Dataset.Crossings != 1500 || back.Baseline.CrossingsPerS != rep.Baseline.CrossingsPerS {
		t.Fatalf("JSON round trip: %+v", back)
	}
	pngPath := filepath.Join(dir, "report.png")
	if err := rep.WritePNG(pngPath); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(pngPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() != 800 || b.Dy() != 900 {
		t.Fatalf("plot of %v pixels, want 800 x 900", b)
	}
}

// decisionLog collects the rules each crossing passed before prescale.
type decisionLog struct {
	mu     sync.Mutex
	passed map[uint64][]uint32
	err    error
}

func (l *decisionLog) add(data []byte) {
	var b pb.DecisionBatch
	err := proto.Unmarshal(data, &b)
	l.mu.Lock()
	defer l.mu.Unlock()
	if err != nil {
		l.err = err
		return
	}
	for _, d := range b.Decisions {
		key := d.Orbit<<12 | uint64(d.Bcid)
		if _, dup := l.passed[key]; dup {
			l.err = errDuplicateDecision
		}
		var rules []uint32
		for _, r := range d.Rules {
			rules = append(rules, r.Index)
		}
		sort.Slice(rules, func(i, j int) bool { return rules[i] < rules[j] })
		l.passed[key] = rules
	}
}

var errDuplicateDecision = os.ErrExist

func (l *decisionLog) wait(t *testing.T, n int) map[uint64][]uint32 {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for {
		l.mu.Lock()
		got, err := len(l.passed), l.err
		l.mu.Unlock()
		if err != nil {
			t.Fatal(err)
		}
		if got >= n {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d decisions arrived", got, n)
		}
		time.Sleep(5 * time.Millisecond)
	}
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.passed
}

// Two builders and two selection workers over a three-server cluster
// reached by TCP give the accounting of one builder and one worker on an
// embedded server: the same crossings built and decided, the same
// fragments in events, the same rules passed by the same crossings. Only
// the prescaled counts may differ, by at most one per extra worker, since
// each worker prescales its own share.
func TestClusterAccounting(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a three-server cluster")
	}
	const crossings = 4000
	run := func(nw *Network, partitions, workers int) (Accounting, map[uint64][]uint32) {
		t.Helper()
		routed := nw.RoutedMessages()
		t.Helper()
		ds, err := Generate(GenerateConfig{Crossings: crossings, Partitions: partitions, Seed: 7})
		if err != nil {
			t.Fatal(err)
		}
		log := &decisionLog{passed: map[uint64][]uint32{}}
		rep, err := Run(context.Background(), Config{
			Dataset: ds, Network: nw, Workers: workers, BaselineRuns: -1, Decisions: log.add,
		})
		if err != nil {
			t.Fatal(err)
		}
		st := rep.Steps[0]
		if st.Error != "" || !st.Account.Lossless() {
			t.Fatalf("%s, %d builders, %d workers: %+v (%s)", nw.Kind, partitions, workers, st.Account, st.Error)
		}
		if rep.Builders != partitions || rep.Workers != workers || len(st.Account.BuiltBy) != partitions || len(st.Account.DecidedBy) != workers {
			t.Fatalf("report of %d builders and %d workers: %+v", rep.Builders, rep.Workers, st.Account)
		}
		for _, n := range append(st.Account.BuiltBy, st.Account.DecidedBy...) {
			if n == 0 {
				t.Fatalf("a builder or worker had nothing to do: built %v, decided %v", st.Account.BuiltBy, st.Account.DecidedBy)
			}
		}
		if nw.Kind == "cluster" && nw.RoutedMessages() == routed {
			t.Fatal("no message crossed a route: the cluster was not exercised")
		}
		return st.Account, log.wait(t, crossings)
	}
	single, err := Embedded()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(single.Close)
	cluster, err := Cluster(3, 10*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(cluster.Close)
	if cluster.Kind != "cluster" || len(cluster.URLs) != 3 {
		t.Fatalf("cluster network %+v", cluster)
	}
	one, oneDecisions := run(single, 1, 1)
	two, twoDecisions := run(cluster, 2, 2)

	same := func(name string, a, b uint64) {
		if a != b {
			t.Errorf("%s: %d with one of each, %d scaled out", name, a, b)
		}
	}
	same("crossings offered", one.CrossingsOffered, two.CrossingsOffered)
	same("fragments offered", one.FragmentsOffered, two.FragmentsOffered)
	same("fragments received", one.FragmentsReceived, two.FragmentsReceived)
	same("fragments in events", one.FragmentsInEvents, two.FragmentsInEvents)
	same("events built", one.EventsBuilt, two.EventsBuilt)
	same("events complete", one.EventsComplete, two.EventsComplete)
	same("events decided", one.EventsDecided, two.EventsDecided)
	same("crossings", one.EventsDecided, crossings)
	if len(one.Rules) != len(two.Rules) {
		t.Fatalf("%d rules and %d", len(one.Rules), len(two.Rules))
	}
	for i, r := range one.Rules {
		s := two.Rules[i]
		same("rule "+r.Name+" passed", r.Passed, s.Passed)
		if r.Prescale > 0 && r.Kept != r.Passed/uint64(r.Prescale) {
			t.Errorf("rule %s: one worker kept %d of %d at prescale %d", r.Name, r.Kept, r.Passed, r.Prescale)
		}
		if s.Kept > r.Kept || r.Kept-s.Kept > 1 {
			t.Errorf("rule %s: kept %d by one worker, %d by two", r.Name, r.Kept, s.Kept)
		}
	}
	if len(oneDecisions) != crossings || len(twoDecisions) != crossings {
		t.Fatalf("%d and %d crossings decided", len(oneDecisions), len(twoDecisions))
	}
	for key, rules := range oneDecisions {
		other, ok := twoDecisions[key]
		if !ok || len(other) != len(rules) {
			t.Fatalf("crossing %x: rules %v with one of each, %v scaled out", key, rules, other)
		}
		for i := range rules {
			if rules[i] != other[i] {
				t.Fatalf("crossing %x: rules %v with one of each, %v scaled out", key, rules, other)
			}
		}
	}
}

// With the capture on, every step's batches are stored in a JetStream
// stream and counted: all of them when the stream has room, and when it
// fills up the batches it refused count as lost and fail the step, with
// the reason named (the latency bound is set out of reach: speed is not
// judged here). The streams are removed after their steps.
func TestCaptureCountsStoredBatches(t *testing.T) {
	ds, err := Generate(GenerateConfig{Crossings: 2000, Seed: 2})
	if err != nil {
		t.Fatal(err)
	}
	nw, err := EmbeddedStore(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nw.Close)
	for _, c := range []struct {
		bytes int64
		pass  bool
	}{{64 << 20, true}, {64 << 10, false}} {
		rep, err := Run(context.Background(), Config{Dataset: ds, Origin: "test", Network: nw, Workers: 1, Rates: []float64{0},
			BaselineRuns: -1, Capture: true, CaptureBytes: c.bytes, P99Bound: time.Minute})
		if err != nil {
			t.Fatal(err)
		}
		if !rep.Capture || len(rep.Steps) != 1 {
			t.Fatalf("capture %v, %d steps", rep.Capture, len(rep.Steps))
		}
		st := rep.Steps[0]
		cc := st.Account.Capture
		if cc == nil || cc.Published != st.Account.BatchesOffered+uint64(len(ds.Ends)) {
			t.Fatalf("%d-byte stream: capture counts %+v for %d batches and %d end markers", c.bytes, cc, st.Account.BatchesOffered, len(ds.Ends))
		}
		if st.Pass != c.pass || (cc.Stored == cc.Published) != c.pass {
			t.Errorf("%d-byte stream: pass %v (%s), stored %d of %d", c.bytes, st.Pass, st.Reason, cc.Stored, cc.Published)
		}
		if !c.pass && !strings.Contains(st.Reason, "fragment batches not stored by the capture") {
			t.Errorf("reason %q does not name the capture", st.Reason)
		}
	}
	// Nothing is left behind in the store.
	if n := nw.srvs[0].GlobalAccount().JetStreamUsage().Streams; n != 0 {
		t.Errorf("%d streams left in the store", n)
	}
	// A stream of a step's name that is there already (someone else's) is
	// neither counted nor removed: the test stops before that step.
	nc, err := nw.Connect("someone-else")
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	theirs, _, err := capture.Open(context.Background(), js, capture.Options{Subjects: transport.Subjects{Prefix: "mine.r1"}, MaxBytes: 1 << 20})
	if err != nil {
		t.Fatal(err)
	}
	_, err = Run(context.Background(), Config{Dataset: ds, Origin: "test", Network: nw, Workers: 1, Rates: []float64{0},
		BaselineRuns: -1, Capture: true, SubjectPrefix: "mine", P99Bound: time.Minute})
	if err == nil || !strings.Contains(err.Error(), "exists already") {
		t.Errorf("a test onto an existing capture stream: %v", err)
	}
	if _, err := theirs.Info(context.Background()); err != nil {
		t.Errorf("the existing stream was removed: %v", err)
	}
}
