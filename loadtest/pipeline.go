package loadtest

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/encoding/protowire"

	"github.com/bunchsieve/bunchsieve/builder"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/assembler"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/services/telemetry"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// pipeline is one run of the chain under test: a feed, one builder per
// share of the dataset and a number of selection workers in one queue
// group, each on a connection of its own as separate processes would be.
type pipeline struct {
	ds       *Dataset
	net      *Network
	subjects transport.Subjects
	conns    []*nats.Conn
	feed     *Feed
	builders []*assembler.Assembler
	workers  []*selector.Selector
	e2e      telemetry.Latency
	// seen counts the decisions the decisions subscriber received.
	seen atomic.Uint64
	hook bool
}

// pipelineConfig says how to wire a pipeline.
type pipelineConfig struct {
	ds       *Dataset
	net      *Network
	menu     *trigger.Menu
	workers  int
	linger   time.Duration
	subjects transport.Subjects
	logger   *slog.Logger
	// decisions, if not nil, gets every decision batch.
	decisions func([]byte)
}

func newPipeline(cfg pipelineConfig) (*pipeline, error) {
	p := &pipeline{ds: cfg.ds, net: cfg.net, subjects: cfg.subjects}
	conn := func(name string) (*nats.Conn, error) {
		nc, err := cfg.net.Connect(name)
		if err != nil {
			return nil, err
		}
		p.conns = append(p.conns, nc)
		return nc, nil
	}
	fail := func(err error) (*pipeline, error) {
		p.close()
		return nil, err
	}
	ncF, err := conn("loadtest-feed")
	if err != nil {
		return fail(err)
	}
	p.feed = NewFeed(cfg.ds, ncF, cfg.subjects)
	d := cfg.ds.Description
	bc := runconfig.Default().BuilderConfig(cfg.ds.Sources)
	bc.Run = cfg.ds.Run
	for k := 0; k < cfg.ds.Partitions; k++ {
		nc, err := conn(fmt.Sprintf("loadtest-builder-%d", k))
		if err != nil {
			return fail(err)
		}
		a, err := assembler.New(assembler.Config{
			Builder: bc, Instance: k, Instances: cfg.ds.Partitions, LumiSliceOrbits: d.Config.LumiSliceOrbits,
			Linger: cfg.linger, Subjects: cfg.subjects, Logger: cfg.logger,
		}, nc, prometheus.NewRegistry())
		if err != nil {
			return fail(err)
		}
		p.builders = append(p.builders, a)
	}
	if cfg.decisions != nil {
		nc, err := conn("loadtest-decisions")
		if err != nil {
			return fail(err)
		}
		p.hook = true
		if _, err := transport.Subscribe(nc, cfg.subjects.Decisions(), "", func(m *nats.Msg) {
			cfg.decisions(m.Data)
			p.seen.Add(uint64(countField(m.Data, 3)))
		}); err != nil {
			return fail(err)
		}
		if err := nc.Flush(); err != nil {
			return fail(fmt.Errorf("loadtest: subscribe decisions: %w", err))
		}
	}
	for w := 0; w < cfg.workers; w++ {
		nc, err := conn(fmt.Sprintf("loadtest-select-%d", w))
		if err != nil {
			return fail(err)
		}
		s, err := selector.New(selector.Config{
			Menu: cfg.menu, Geometry: d.Geometry, Worker: w, Builders: cfg.ds.Partitions, Workers: cfg.workers,
			EndToEnd: &p.e2e, Subjects: cfg.subjects, Logger: cfg.logger,
		}, nc, prometheus.NewRegistry())
		if err != nil {
			return fail(err)
		}
		p.workers = append(p.workers, s)
	}
	return p, nil
}

// startSubjects are the subjects whose subscribers must be known to every
// server before the feed starts: each builder share's fragments, the
// built events and, with the hook, the decisions. The workers' end and
// progress subjects carry messages only at the end of a run.
func (p *pipeline) startSubjects() []string {
	out := []string{p.subjects.Built()}
	for k := 0; k < p.ds.Partitions; k++ {
		out = append(out, p.subjects.Fragments(k, p.ds.Sources[0]))
	}
	if p.hook {
		out = append(out, p.subjects.Decisions())
	}
	return out
}

func (p *pipeline) close() {
	for _, nc := range p.conns {
		nc.Close()
	}
}

// runResult is what one pipeline run measured.
type runResult struct {
	feed   FeedStats
	end    time.Time // the last worker finished
	cpu    time.Duration
	cpuSys time.Duration
	memory MemorySample
	series []MemorySample
	err    error
}

// run offers crossings at rateHz and waits until every worker has decided
// every event, or drain passes after offering ended.
func (p *pipeline) run(ctx context.Context, crossings uint64, rateHz float64, drain time.Duration, keepMemory bool, memEvery time.Duration, progress func(offered, decided uint64)) runResult {
	var res runResult
	consumers, stop := context.WithCancel(context.Background())
	defer stop()
	var wg sync.WaitGroup
	errs := make(chan error, len(p.builders)+len(p.workers))
	ends := make(chan time.Time, len(p.workers))
	for _, a := range p.builders {
		wg.Add(1)
		go func() {
			defer wg.Done()
			errs <- a.Run(consumers)
		}()
	}
	for _, s := range p.workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			errs <- s.Run(consumers)
			ends <- time.Now()
		}()
	}
	waitReady := func(ready <-chan struct{}) error {
		select {
		case <-ready:
			return nil
		case err := <-errs:
			return errors.Join(errors.New("loadtest: a stage stopped before it was ready"), err)
		case <-time.After(10 * time.Second):
			return errors.New("loadtest: a stage did not subscribe within 10 s")
		}
	}
	for _, a := range p.builders {
		if res.err = waitReady(a.Ready()); res.err != nil {
			stop()
			wg.Wait()
			return res
		}
	}
	for _, s := range p.workers {
		if res.err = waitReady(s.Ready()); res.err != nil {
			stop()
			wg.Wait()
			return res
		}
	}
	if res.err = p.net.AwaitInterest(p.startSubjects(), 10*time.Second); res.err != nil {
		stop()
		wg.Wait()
		return res
	}

	mem := startSampler(memEvery, keepMemory)
	u0, s0 := cpuTime()
	var feedProgress func(uint64)
	if progress != nil {
		feedProgress = func(n uint64) { progress(n, p.decided()) }
	}
	feedDone := make(chan struct{})
	go func() {
		defer close(feedDone)
		res.feed, res.err = p.feed.Run(ctx, crossings, rateHz, feedProgress)
	}()
	<-feedDone
	if res.err != nil {
		stop()
	}
	// Drain: the workers end by themselves once every event is decided.
	timer := time.NewTimer(drain)
	defer timer.Stop()
	tick := time.NewTicker(200 * time.Millisecond)
	defer tick.Stop()
	for finished := 0; finished < len(p.workers); {
		select {
		case t := <-ends:
			finished++
			res.end = t
		case <-timer.C:
			stop()
			timer.Reset(time.Hour)
		case <-tick.C:
			if progress != nil {
				progress(res.feed.Crossings, p.decided())
			}
		}
	}
	u1, s1 := cpuTime()
	res.cpu, res.cpuSys = u1-u0, s1-s0
	// Builders end at their sources' markers, before the workers.
	stop()
	wg.Wait()
	if p.hook {
		// Let the decisions subscriber see every decision before the
		// connections close; over a cluster they may still be on a route.
		want, deadline := p.decided(), time.Now().Add(10*time.Second)
		for p.seen.Load() < want && time.Now().Before(deadline) {
			time.Sleep(2 * time.Millisecond)
		}
	}
	close(errs)
	for err := range errs {
		res.err = errors.Join(res.err, err)
	}
	res.memory, res.series = mem.Stop()
	return res
}

// countField counts the top-level occurrences of field num in a protobuf
// encoding (the decisions of a DecisionBatch).
func countField(b []byte, num protowire.Number) int {
	n := 0
	for len(b) > 0 {
		f, typ, k := pb.ConsumeTag(b)
		if k < 0 {
			return n
		}
		b = b[k:]
		if k = protowire.ConsumeFieldValue(f, typ, b); k < 0 {
			return n
		}
		b = b[k:]
		if f == num {
			n++
		}
	}
	return n
}

// decided sums the workers' decided events.
func (p *pipeline) decided() uint64 {
	var n uint64
	for _, s := range p.workers {
		n += s.Events()
	}
	return n
}

// accounting sums what the builders and workers counted.
func (p *pipeline) accounting(offered FeedStats) Accounting {
	var a Accounting
	a.CrossingsOffered = offered.Crossings
	a.FragmentsOffered = offered.Fragments
	a.BatchesOffered = offered.Batches
	var total builder.Stats
	for _, b := range p.builders {
		s := b.Stats()
		total.Received += s.Received
		total.InEvents += s.InEvents
		total.Duplicate += s.Duplicate
		total.Late += s.Late
		total.Malformed += s.Malformed
		total.UnknownSource += s.UnknownSource
		total.OutOfTime += s.OutOfTime
		total.EventsComplete += s.EventsComplete
		total.EventsIncomplete += s.EventsIncomplete
		a.BuiltBy = append(a.BuiltBy, s.EventsComplete+s.EventsIncomplete)
		a.FragmentBatchesDropped += b.DroppedMessages()
		a.FragmentBatchesUndecodable += b.UndecodableMessages()
	}
	a.FragmentsReceived = total.Received
	a.FragmentsInEvents = total.InEvents
	a.FragmentsDiscarded = total.Duplicate + total.Late + total.Malformed + total.UnknownSource + total.OutOfTime
	a.EventsComplete = total.EventsComplete
	a.EventsIncomplete = total.EventsIncomplete
	a.EventsBuilt = total.EventsComplete + total.EventsIncomplete
	rules := map[string]int{}
	for _, w := range p.workers {
		a.EventsDecided += w.Events()
		a.DecidedBy = append(a.DecidedBy, w.Events())
		a.Accepted += w.Accepted()
		a.EventBatchesDropped += w.DroppedMessages()
		a.EventBatchesUndecodable += w.UndecodableMessages()
		for _, rc := range w.Counts() {
			i, ok := rules[rc.Name]
			if !ok {
				i = len(a.Rules)
				rules[rc.Name] = i
				a.Rules = append(a.Rules, RuleCount{Name: rc.Name, Prescale: rc.Prescale})
			}
			a.Rules[i].Passed += rc.Passed
			a.Rules[i].Kept += rc.Kept
		}
	}
	if a.CrossingsOffered > a.EventsDecided {
		a.EventsLost = a.CrossingsOffered - a.EventsDecided
	}
	return a
}
