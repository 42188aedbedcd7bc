package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"strconv"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/assembler"
	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/services/summary"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

const defaultNATS = "nats://127.0.0.1:4222"

// serveMetrics serves reg on addr until the returned stop is called.
func serveMetrics(addr string, reg *prometheus.Registry) (stop func(), err error) {
	if addr == "" {
		return func() {}, nil
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("metrics address: %w", err)
	}
	mux := http.NewServeMux()
	mux.Handle("/metrics", promhttp.HandlerFor(reg, promhttp.HandlerOpts{Registry: reg}))
	srv := &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
	go func() { _ = srv.Serve(ln) }()
	return func() {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		_ = srv.Shutdown(ctx)
	}, nil
}

func newRegistry() *prometheus.Registry {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return reg
}

func finish(e *env, path string, s *summary.Summary, print func(io.Writer)) error {
	print(e.stdout)
	if path != "" {
		return s.WriteJSON(path)
	}
	return nil
}

// faultFlags collects repeated --fault flags.
type faultFlags []emulator.Fault

func (f *faultFlags) String() string { return fmt.Sprintf("%d faults", len(*f)) }

func (f *faultFlags) Set(v string) error {
	fault, err := emulator.ParseFault(v)
	if err != nil {
		return err
	}
	*f = append(*f, fault)
	return nil
}

const faultHelp = "inject readout faults, e.g. `sources=3+5-7,drop=0.05,duplicate=0.05,corrupt=0.01,delay=0.01,delay_crossings=16,reorder=0.01,stall=1000-5000,clock_skew_ns=40` (repeatable)"

func runReadout(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "readout", "[flags]")
	var rf runFlags
	rf.register(fs, "", true)
	url := fs.String("nats", defaultNATS, "NATS server `URL`")
	partitions := fs.Int("builders", 1, "number of builder instances sharing the crossings")
	replay := fs.String("replay", "", "publish the recorded stream `FILE` instead of generating crossings")
	speed := fs.String("speed", "max", "replay pace as a factor of the crossings' own machine time (1 = the collider's crossing rate, tens of millions a second: as fast as possible in practice), or max; --rate N replays at N crossings/s instead")
	var faults faultFlags
	fs.Var(&faults, "fault", faultHelp)
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	set := setFlags(fs)
	cfg, err := rf.resolve(set)
	if err != nil {
		return err
	}
	if *partitions < 1 {
		return usagef("--builders %d: want >= 1", *partitions)
	}
	if *replay != "" {
		for _, f := range []string{"seed", "crossings", "fault", "sources", "builders", "config"} {
			if set[f] {
				return usagef("--%s does not apply to --replay: the stream file fixes it", f)
			}
		}
		var pace emulator.Pace
		switch {
		case set["rate"] && set["speed"] && *speed != "max":
			return usagef("--rate and --speed both pace a replay; give one")
		case set["rate"]:
			// 0 is as fast as possible, as for a generated stream;
			// resolve has refused negative, NaN and infinite rates.
			pace.RateHz = cfg.RateHz
		case *speed != "max":
			pace.Speed, err = strconv.ParseFloat(*speed, 64)
			if err != nil || !(pace.Speed > 0) || math.IsInf(pace.Speed, 0) {
				return usagef("--speed %q: want a positive factor of the machine's time or max", *speed)
			}
		}
		return replayStream(ctx, e, *url, *replay, pace, cfg, rf)
	} else if set["speed"] {
		return usagef("--speed applies to --replay only")
	}
	cfg.Faults = append(cfg.Faults, faults...)
	gen, part, sources, err := newGenerator(cfg)
	if err != nil {
		return err
	}
	nc, err := transport.Connect(*url, "bunchsieve-readout")
	if err != nil {
		return err
	}
	defer nc.Close()
	reg := newRegistry()
	emu, err := emulator.New(emulator.Config{
		Run: cfg.Run, Seed: cfg.Seed, RateHz: cfg.RateHz, Crossings: rf.crossings, BatchCrossings: cfg.BatchCrossings,
		Partitions: *partitions, Faults: cfg.Faults, Partition: part,
	}, gen, sources, emulator.NewNATSSink(nc, cfg.Subjects()), reg)
	if err != nil {
		return err
	}
	stop, err := serveMetrics(rf.metrics, reg)
	if err != nil {
		return err
	}
	defer stop()
	if rf.duration > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, rf.duration)
		defer cancel()
	}
	start := time.Now()
	runErr := emu.Run(ctx)
	fmt.Fprintf(e.stdout, "readout: %d crossings, %d fragments published\n", emu.Offered(), emu.FragmentsSent())
	if inj := emu.Injected(); inj != (emulator.InjectedCounts{}) {
		fmt.Fprintf(e.stdout, "readout: faults injected in fragments: %d dropped, %d duplicated, %d corrupted, %d delayed, %d reordered, %d stalled\n",
			inj.Dropped, inj.Duplicated, inj.Corrupted, inj.Delayed, inj.Reordered, inj.Stalled)
	}
	s := &summary.Summary{Run: cfg.Run, Seed: cfg.Seed, Sources: len(sources), DurationS: time.Since(start).Seconds(), Crossings: emu.Offered()}
	if rf.summary != "" {
		if err := s.WriteJSON(rf.summary); err != nil {
			return err
		}
	}
	return runErr
}

// readoutSources loads cfg's detector description and returns it with
// the ids of the sources the readout sends from.
func readoutSources(cfg runconfig.Config) (*detector.Description, []uint32, error) {
	desc, err := cfg.LoadDetector()
	if err != nil {
		return nil, nil, err
	}
	_, sources, err := cfg.Readout(desc)
	if err != nil {
		return nil, nil, err
	}
	return desc, sources, nil
}

// newGenerator builds the run's crossing generator, its partition and the
// ids of the sources that send fragments.
func newGenerator(cfg runconfig.Config) (detector.Generator, *detector.Partition, []uint32, error) {
	desc, err := cfg.LoadDetector()
	if err != nil {
		return nil, nil, nil, err
	}
	part, sources, err := cfg.Readout(desc)
	if err != nil {
		return nil, nil, nil, err
	}
	gen, err := cfg.NewGenerator(desc, part)
	if err != nil {
		return nil, nil, nil, err
	}
	return gen, part, sources, nil
}

func replayStream(ctx context.Context, e *env, url, path string, pace emulator.Pace, cfg runconfig.Config, rf runFlags) error {
	r, err := recording.Open(path)
	if err != nil {
		return err
	}
	defer r.Close()
	nc, err := transport.Connect(url, "bunchsieve-readout-replay")
	if err != nil {
		return err
	}
	defer nc.Close()
	if rf.duration > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, rf.duration)
		defer cancel()
	}
	start := time.Now()
	st, runErr := emulator.Replay(ctx, r, emulator.NewNATSSink(nc, cfg.Subjects()), pace)
	took := time.Since(start)
	fmt.Fprintf(e.stdout, "readout: replayed %d batches, %d fragments from %s in %.2fs (%.0f fragments/s)\n",
		st.Batches, st.Fragments, path, took.Seconds(), float64(st.Fragments)/took.Seconds())
	h := r.Header()
	s := &summary.Summary{Run: h.Run, Seed: h.Seed, Sources: len(h.SourceIds), DurationS: took.Seconds(), Crossings: st.Crossings}
	if rf.summary != "" {
		if err := s.WriteJSON(rf.summary); err != nil {
			return errors.Join(runErr, err)
		}
	}
	return runErr
}

func runBuild(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "build", "[flags]")
	var rf runFlags
	rf.register(fs, "", false)
	url := fs.String("nats", defaultNATS, "NATS server `URL`")
	instance := fs.Int("instance", 0, "this builder's share, 0..builders-1")
	instances := fs.Int("builders", 1, "number of builder instances sharing the crossings")
	state := fs.String("state", "", "state `FILE` for stopping and restarting within a run: on a stop the builder writes where it was, and a builder started on the file takes up from there (default: a stop ends this builder's part of the run)")
	catchUp := fs.Bool("catch-up", false, "with --state: a builder taking up a run first builds, from the capture stream (bunchsieve capture open), the batches published while no builder ran (default: those are lost to core NATS)")
	catchUpStream := fs.String("catch-up-stream", "", "capture stream `NAME` for --catch-up (default: the subject prefix, dots as underscores, then _fragments)")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	if *catchUp && *state == "" {
		return usagef("--catch-up needs --state: only a builder taking up a run has something to catch up")
	}
	if *catchUpStream != "" && !*catchUp {
		return usagef("--catch-up-stream without --catch-up")
	}
	cfg, err := rf.resolve(setFlags(fs))
	if err != nil {
		return err
	}
	if *instances < 1 || *instance < 0 || *instance >= *instances {
		return usagef("--instance %d of --builders %d: want 0 <= instance < builders", *instance, *instances)
	}
	desc, sources, err := readoutSources(cfg)
	if err != nil {
		return err
	}
	nc, err := transport.Connect(*url, "bunchsieve-build")
	if err != nil {
		return err
	}
	defer nc.Close()
	var backlog assembler.Backlog
	if *catchUp {
		b, err := openBacklog(ctx, nc, cfg, *catchUpStream)
		if err != nil {
			return err
		}
		backlog = b
	}
	reg := newRegistry()
	asm, err := assembler.New(assembler.Config{
		Builder: cfg.BuilderConfig(sources), Instance: *instance, Instances: *instances,
		LumiSliceOrbits: cfg.LumiSlice(desc), Subjects: cfg.Subjects(), StateFile: *state, CatchUp: backlog,
	}, nc, reg)
	if err != nil {
		return err
	}
	if asm.Resumed() {
		fmt.Fprintf(e.stderr, "bunchsieve build: taking up run %d where the builder before stopped (%s)\n", cfg.Run, *state)
	}
	stop, err := serveMetrics(rf.metrics, reg)
	if err != nil {
		return err
	}
	defer stop()
	start := time.Now()
	runErr := asm.Run(ctx)
	b := asm.Stats()
	s := &summary.Summary{
		Run: cfg.Run, Sources: len(sources), DurationS: time.Since(start).Seconds(),
		EventsBuilt: b.EventsComplete + b.EventsIncomplete, EventsComplete: b.EventsComplete, EventsIncomplete: b.EventsIncomplete,
		Fragments: summary.Fragments{Received: b.Received, InEvents: b.InEvents, Duplicate: b.Duplicate, Late: b.Late,
			Malformed: b.Malformed, UnknownSource: b.UnknownSource, OutOfTime: b.OutOfTime},
		Transport: summary.Transport{FragmentBatchesDropped: asm.DroppedMessages(), FragmentBatchesUndecodable: asm.UndecodableMessages()},
		Latency:   summary.Latency{BuildP50S: asm.Latency.Quantile(0.5).Seconds(), BuildP99S: asm.Latency.Quantile(0.99).Seconds()},
	}
	if err := finish(e, rf.summary, s, s.PrintBuild); err != nil {
		return err
	}
	if taken, repeated := asm.CatchUpStats(); taken+repeated > 0 {
		fmt.Fprintf(e.stderr, "bunchsieve build: caught up %d fragment batches from the capture stream; %d passed over, taken already\n", taken, repeated)
	}
	return runErr
}

// openBacklog finds the capture stream a restarted builder catches up
// from, so that a missing one is an error at the start, not a loss later.
func openBacklog(ctx context.Context, nc *nats.Conn, cfg runconfig.Config, name string) (assembler.Backlog, error) {
	js, err := jetstream.New(nc)
	if err != nil {
		return nil, fmt.Errorf("capture: %w", err)
	}
	cctx, cancel := context.WithTimeout(ctx, captureTimeout)
	defer cancel()
	b, err := capture.FindBacklog(cctx, js, name, cfg.Subjects())
	if err != nil {
		return nil, fmt.Errorf("--catch-up: %w", err)
	}
	return b, nil
}

func runSelect(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "select", "[flags]")
	var rf runFlags
	rf.register(fs, "", false)
	fs.StringVar(&rf.menu, "menu", "", "menu `FILE` (default: the built-in examples/menus/starter.yaml)")
	url := fs.String("nats", defaultNATS, "NATS server `URL`")
	builders := fs.Int("builders", 1, "number of builder instances feeding the selection")
	workers := fs.Int("workers", 1, "number of selection workers sharing the events (each a separate process with its own --worker)")
	worker := fs.Int("worker", 0, "this worker's number, 0 .. workers-1")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	cfg, err := rf.resolve(setFlags(fs))
	if err != nil {
		return err
	}
	if *builders < 1 {
		return usagef("--builders %d: want >= 1", *builders)
	}
	if *workers < 1 || *worker < 0 || *worker >= *workers {
		return usagef("--worker %d of --workers %d: want 0 <= worker < workers", *worker, *workers)
	}
	desc, err := cfg.LoadDetector()
	if err != nil {
		return err
	}
	menu, err := cfg.LoadMenu()
	if err != nil {
		return err
	}
	nc, err := transport.Connect(*url, "bunchsieve-select")
	if err != nil {
		return err
	}
	defer nc.Close()
	reg := newRegistry()
	sel, err := selector.New(selector.Config{Menu: menu, Geometry: desc.Geometry, Builders: *builders, Worker: *worker, Workers: *workers, Subjects: cfg.Subjects()}, nc, reg)
	if err != nil {
		return err
	}
	stop, err := serveMetrics(rf.metrics, reg)
	if err != nil {
		return err
	}
	defer stop()
	start := time.Now()
	runErr := sel.Run(ctx)
	s := &summary.Summary{
		Run: cfg.Run, DurationS: time.Since(start).Seconds(), EventsDecided: sel.Events(), Accepted: sel.Accepted(),
		Menu: menu.Name, MenuHash: menu.Hash, PrescaleSet: sel.Trigger().PrescaleStatus().Set,
		Transport: summary.Transport{EventBatchesDropped: sel.DroppedMessages(), EventBatchesUndecodable: sel.UndecodableMessages(), EventsLost: sel.EventsLost()},
		Latency:   summary.Latency{EndToEndP50S: sel.EndToEnd.Quantile(0.5).Seconds(), EndToEndP99S: sel.EndToEnd.Quantile(0.99).Seconds(), EndToEndMaxS: sel.EndToEnd.Max().Seconds()},
	}
	for _, rc := range sel.Counts() {
		s.Rules = append(s.Rules, summary.Rule{Name: rc.Name, Prescale: rc.Prescale, Passed: rc.Passed, Accepted: rc.Kept})
	}
	if err := finish(e, rf.summary, s, s.PrintSelection); err != nil {
		return err
	}
	return runErr
}
