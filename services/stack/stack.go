// Package stack is the all-in-one chain behind `bunchsieve up` and
// `bunchsieve serve`: an embedded NATS server on loopback, the readout
// emulators, the event builder and the selection connected to it
// in-process, an HTTP server with /metrics and the operator page, and the
// run controller that configures, starts and stops runs.
package stack

import (
	"context"
	"io"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/summary"
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
	// only by default); port -1 picks a free port, 0 means -1.
	NATSHost string
	NATSPort int
	// StoreDir, when not empty, turns JetStream on in the embedded server
	// with its store there.
	StoreDir string
	// Status receives one status line per Run.StatusEvery; nil means none.
	Status io.Writer
	// DrainTimeout bounds the wait for in-flight crossings after offering
	// stopped; zero means 30 s.
	DrainTimeout time.Duration
}

// Stack is one run on its own host: what `bunchsieve up` runs.
type Stack struct {
	host  *Host
	chain *Chain
}

// New validates the options, loads detector and menu, starts the NATS
// server, binds the HTTP listener and wires the chain. Call Run next, and
// Close in any case.
func New(opts Options) (*Stack, error) {
	if err := opts.Run.Validate(); err != nil {
		return nil, err
	}
	menu, err := opts.Run.LoadMenu()
	if err != nil {
		return nil, err
	}
	host, err := NewHost(HostOptions{MetricsAddr: opts.MetricsAddr, NATSHost: opts.NATSHost, NATSPort: opts.NATSPort, StoreDir: opts.StoreDir})
	if err != nil {
		return nil, err
	}
	chain, err := host.NewChain(ChainOptions{
		Run: opts.Run, Menu: menu, Crossings: opts.Crossings, Duration: opts.Duration,
		Status: opts.Status, DrainTimeout: opts.DrainTimeout,
	})
	if err != nil {
		host.Close()
		return nil, err
	}
	host.run.set(chain.state)
	return &Stack{host: host, chain: chain}, nil
}

// Host returns the stack's host, to mount more HTTP handlers before Run.
func (s *Stack) Host() *Host { return s.host }

// Chain returns the stack's run.
func (s *Stack) Chain() *Chain { return s.chain }

// MetricsURL returns the URL of /metrics, or "" without an HTTP server.
func (s *Stack) MetricsURL() string { return s.host.MetricsURL() }

// NATSURL returns the client URL of the embedded server.
func (s *Stack) NATSURL() string { return s.host.NATSURL() }

// Registry returns the registry of the run's metrics.
func (s *Stack) Registry() *prometheus.Registry { return s.chain.reg }

// Run starts serving HTTP, offers crossings until the crossing limit, the
// duration or stop ends offering, then drains in-flight crossings and
// returns the summary.
func (s *Stack) Run(stop context.Context) (*summary.Summary, error) {
	s.host.Serve()
	return s.chain.Run(stop)
}

// Close stops the run's connections and the host. It is safe to call more
// than once.
func (s *Stack) Close() {
	s.chain.Close()
	s.host.Close()
}
