// Package stack is the all-in-one chain behind `bunchsieve up`: an embedded
// NATS server on loopback, the readout emulators, the event builder and the
// selection connected to it in-process, and an HTTP server with /metrics.
package stack

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"strconv"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/services/assembler"
	"github.com/bunchsieve/bunchsieve/services/emulator"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/selector"
	"github.com/bunchsieve/bunchsieve/services/summary"
	"github.com/bunchsieve/bunchsieve/services/transport"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// Options are the settings of one `up` run on top of the run configuration.
type Options struct {
	Run runconfig.Config
	// Crossings stops offering after this many crossings; zero means no
	// limit (then Duration or the stop context ends the run).
	Crossings uint64
	// Duration stops offering after this long; zero means no limit.
	Duration time.Duration
	// MetricsAddr is where /metrics is served; empty means no HTTP server.
	MetricsAddr string
	// NATSHost and NATSPort are where the embedded server listens (loopback
	// only by default); port -1 picks a free port, 0 means 4222.
	NATSHost string
	NATSPort int
	// Status receives one status line per Run.StatusEvery; nil means none.
	Status io.Writer
	// DrainTimeout bounds the wait for in-flight crossings after offering
	// stopped; zero means 30 s.
	DrainTimeout time.Duration
}

// Stack is a running all-in-one chain.
type Stack struct {
	opts    Options
	desc    *detector.Description
	menu    *trigger.Menu
	srv     *server.Server
	conns   []*nats.Conn
	reg     *prometheus.Registry
	http    *http.Server
	httpLn  net.Listener
	emu     *emulator.Emulator
	asm     *assembler.Assembler
	sel     *selector.Selector
	started time.Time
}

// New validates the options, loads detector and menu, and starts the NATS
// and HTTP servers. Call Run next, and Close in any case.
func New(opts Options) (*Stack, error) {
	if opts.DrainTimeout == 0 {
		opts.DrainTimeout = 30 * time.Second
	}
	if opts.NATSPort == 0 {
		opts.NATSPort = -1
	}
	if err := opts.Run.Validate(); err != nil {
		return nil, fmt.Errorf("stack: %w", err)
	}
	desc, err := opts.Run.LoadDetector()
	if err != nil {
		return nil, err
	}
	menu, err := opts.Run.LoadMenu()
	if err != nil {
		return nil, err
	}
	s := &Stack{opts: opts, desc: desc, menu: menu, reg: prometheus.NewRegistry()}
	if opts.MetricsAddr != "" {
		ln, err := net.Listen("tcp", opts.MetricsAddr)
		if err != nil {
			return nil, fmt.Errorf("stack: metrics address: %w", err)
		}
		s.httpLn = ln
	}
	s.srv, err = transport.Embedded(opts.NATSHost, opts.NATSPort)
	if err != nil {
		s.Close()
		return nil, err
	}
	if err := s.wire(); err != nil {
		s.Close()
		return nil, err
	}
	return s, nil
}

func (s *Stack) conn(name string) (*nats.Conn, error) {
	nc, err := transport.ConnectInProcess(s.srv, name)
	if err != nil {
		return nil, err
	}
	s.conns = append(s.conns, nc)
	return nc, nil
}

func (s *Stack) wire() error {
	rc := s.opts.Run
	s.reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	runInfo := prometheus.NewGauge(prometheus.GaugeOpts{
		Name: "bunchsieve_run_info", Help: "Constant 1, labelled with the run number and the menu in force.",
		ConstLabels: prometheus.Labels{"run": strconv.FormatUint(uint64(rc.Run), 10), "menu": s.menu.Name, "menu_hash": s.menu.Hash},
	})
	runInfo.Set(1)
	s.reg.MustRegister(runInfo)

	part, err := detector.NewPartition(s.desc.Geometry, rc.Sources)
	if err != nil {
		return err
	}
	gen, err := detector.NewSimpleGenerator(s.desc, part, rc.Seed, rc.Generator)
	if err != nil {
		return err
	}
	ncE, err := s.conn("readout")
	if err != nil {
		return err
	}
	ncB, err := s.conn("builder")
	if err != nil {
		return err
	}
	ncS, err := s.conn("selection")
	if err != nil {
		return err
	}
	s.emu, err = emulator.New(emulator.Config{
		Run: rc.Run, Seed: rc.Seed, RateHz: rc.RateHz, Crossings: s.opts.Crossings, BatchCrossings: rc.BatchCrossings, Faults: rc.Faults,
	}, gen, part.SourceIDs(), emulator.NewNATSSink(ncE, rc.Subjects()), s.reg)
	if err != nil {
		return err
	}
	s.asm, err = assembler.New(assembler.Config{
		Builder: rc.BuilderConfig(part.SourceIDs()), LumiSliceOrbits: s.desc.Config.LumiSliceOrbits, Subjects: rc.Subjects(),
	}, ncB, s.reg)
	if err != nil {
		return err
	}
	s.sel, err = selector.New(selector.Config{Menu: s.menu, Geometry: s.desc.Geometry, Subjects: rc.Subjects()}, ncS, s.reg)
	return err
}

// MetricsURL returns the URL of /metrics, or "" without an HTTP server.
func (s *Stack) MetricsURL() string {
	if s.httpLn == nil {
		return ""
	}
	return "http://" + s.httpLn.Addr().String() + "/metrics"
}

// NATSURL returns the client URL of the embedded server.
func (s *Stack) NATSURL() string { return s.srv.ClientURL() }

// Registry returns the registry the stack's metrics are on.
func (s *Stack) Registry() *prometheus.Registry { return s.reg }

// Run offers crossings until the crossing limit, the duration or stop ends
// offering, then drains in-flight crossings and returns the summary.
func (s *Stack) Run(stop context.Context) (*summary.Summary, error) {
	if s.httpLn != nil {
		mux := http.NewServeMux()
		mux.Handle("/metrics", promhttp.HandlerFor(s.reg, promhttp.HandlerOpts{Registry: s.reg, EnableOpenMetrics: true}))
		s.http = &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
		go func() { _ = s.http.Serve(s.httpLn) }()
	}
	// The consumers keep running after offering stops, until the end-of-run
	// markers have travelled through; their context only bounds the drain.
	drain, cancelDrain := context.WithCancel(context.Background())
	defer cancelDrain()
	selDone := make(chan error, 1)
	asmDone := make(chan error, 1)
	go func() { selDone <- s.sel.Run(drain) }()
	go func() { asmDone <- s.asm.Run(drain) }()

	// Offer nothing until both consumers are subscribed: core NATS delivers
	// only to subscriptions that exist when a message is published.
	for _, ready := range []<-chan struct{}{s.asm.Ready(), s.sel.Ready()} {
		select {
		case <-ready:
		case err := <-asmDone:
			cancelDrain()
			return s.summary(0), errors.Join(err, <-selDone)
		case err := <-selDone:
			cancelDrain()
			return s.summary(0), errors.Join(err, <-asmDone)
		}
	}
	offer := stop
	if s.opts.Duration > 0 {
		var cancel context.CancelFunc
		offer, cancel = context.WithTimeout(stop, s.opts.Duration)
		defer cancel()
	}
	s.started = time.Now()
	emuDone := make(chan error, 1)
	go func() { emuDone <- s.emu.Run(offer) }()

	st := newStatus(s)
	var tick <-chan time.Time
	if s.opts.Status != nil && s.opts.Run.StatusEvery > 0 {
		t := time.NewTicker(s.opts.Run.StatusEvery)
		defer t.Stop()
		tick = t.C
	}
	var firstErr error
	var drainTimer <-chan time.Time
	emuRunning, asmRunning, selRunning := true, true, true
	for selRunning || asmRunning || emuRunning {
		select {
		case err := <-emuDone:
			emuRunning = false
			firstErr = errors.Join(firstErr, err)
			drainTimer = time.After(s.opts.DrainTimeout)
		case err := <-asmDone:
			asmRunning = false
			firstErr = errors.Join(firstErr, err)
		case err := <-selDone:
			selRunning = false
			firstErr = errors.Join(firstErr, err)
		case <-tick:
			st.line(s.opts.Status)
		case <-drainTimer:
			firstErr = errors.Join(firstErr, fmt.Errorf("stack: in-flight crossings not drained within %v", s.opts.DrainTimeout))
			cancelDrain()
			drainTimer = nil
		}
	}
	return s.summary(time.Since(s.started)), firstErr
}

func (s *Stack) summary(took time.Duration) *summary.Summary {
	b := s.asm.Stats()
	sum := &summary.Summary{
		Run: s.opts.Run.Run, Seed: s.opts.Run.Seed, Sources: s.opts.Run.Sources, DurationS: took.Seconds(),
		Crossings:   s.emu.Offered(),
		EventsBuilt: b.EventsComplete + b.EventsIncomplete, EventsComplete: b.EventsComplete, EventsIncomplete: b.EventsIncomplete,
		EventsDecided: s.sel.Events(),
		Fragments: summary.Fragments{
			Received: b.Received, InEvents: b.InEvents, Duplicate: b.Duplicate, Late: b.Late,
			Malformed: b.Malformed, UnknownSource: b.UnknownSource, OutOfTime: b.OutOfTime,
		},
		Transport: summary.Transport{
			FragmentBatchesDropped: s.asm.DroppedMessages(), EventBatchesDropped: s.sel.DroppedMessages(),
			FragmentBatchesUndecodable: s.asm.UndecodableMessages(), EventBatchesUndecodable: s.sel.UndecodableMessages(),
		},
		Accepted: s.sel.Accepted(),
		Menu:     s.menu.Name, MenuHash: s.menu.Hash,
		Latency: summary.Latency{
			BuildP50S: s.asm.Latency.Quantile(0.5).Seconds(), BuildP99S: s.asm.Latency.Quantile(0.99).Seconds(),
			EndToEndP50S: s.sel.EndToEnd.Quantile(0.5).Seconds(), EndToEndP99S: s.sel.EndToEnd.Quantile(0.99).Seconds(),
			EndToEndMaxS: s.sel.EndToEnd.Max().Seconds(),
		},
	}
	sum.PrescaleSet = s.sel.Trigger().PrescaleStatus().Set
	for _, rc := range s.sel.Counts() {
		sum.Rules = append(sum.Rules, summary.Rule{Name: rc.Name, Prescale: rc.Prescale, Passed: rc.Passed, Accepted: rc.Kept})
	}
	return sum
}

// Close stops the HTTP server, the connections and the embedded NATS
// server. It is safe to call more than once.
func (s *Stack) Close() {
	if s.http != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		_ = s.http.Shutdown(ctx)
		cancel()
		s.http = nil
	} else if s.httpLn != nil {
		_ = s.httpLn.Close()
	}
	s.httpLn = nil
	for _, nc := range s.conns {
		nc.Close()
	}
	s.conns = nil
	if s.srv != nil {
		s.srv.Shutdown()
		s.srv.WaitForShutdown()
		s.srv = nil
	}
}
