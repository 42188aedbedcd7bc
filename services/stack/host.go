package stack

import (
	"context"
	"fmt"
	"net"
	"net/http"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	dto "github.com/prometheus/client_model/go"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// HostOptions say where a host listens.
type HostOptions struct {
	// MetricsAddr is where the HTTP server (/metrics and the operator
	// page) listens; empty means no HTTP server.
	MetricsAddr string
	// NATSHost and NATSPort are where the embedded server listens (loopback
	// only by default); port -1 picks a free port, 0 means -1.
	NATSHost string
	NATSPort int
	// StoreDir, when not empty, turns JetStream on in the embedded server
	// with its store there (for a durable capture, services/capture).
	StoreDir string
}

// Host is what outlives a run: the embedded NATS server, the HTTP server,
// and the registry of process-wide metrics. Chains (one per run) attach
// their own registries to it. Its methods are safe for concurrent use.
type Host struct {
	srv    *server.Server
	reg    *prometheus.Registry
	httpLn net.Listener
	addr   string
	http   *http.Server
	mux    *http.ServeMux

	run *runMetrics

	mu      sync.Mutex
	current prometheus.Gatherer
	closed  bool
}

// NewHost starts the embedded NATS server and binds the HTTP listener.
// Call Serve to start answering HTTP, and Close in any case.
func NewHost(opts HostOptions) (*Host, error) {
	if opts.NATSPort == 0 {
		opts.NATSPort = -1
	}
	h := &Host{reg: prometheus.NewRegistry(), mux: http.NewServeMux(), run: &runMetrics{}}
	h.reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}), h.run)
	if opts.MetricsAddr != "" {
		ln, err := net.Listen("tcp", opts.MetricsAddr)
		if err != nil {
			return nil, fmt.Errorf("stack: metrics address: %w", err)
		}
		h.httpLn, h.addr = ln, ln.Addr().String()
	}
	srv, err := transport.EmbeddedWith(transport.EmbeddedOptions{Host: opts.NATSHost, Port: opts.NATSPort, StoreDir: opts.StoreDir})
	if err != nil {
		h.Close()
		return nil, err
	}
	h.srv = srv
	h.mux.Handle("/metrics", promhttp.HandlerFor(h, promhttp.HandlerOpts{EnableOpenMetrics: true}))
	return h, nil
}

// Gather implements prometheus.Gatherer over the host's metrics and those
// of the chain attached now.
func (h *Host) Gather() ([]*dto.MetricFamily, error) {
	h.mu.Lock()
	cur := h.current
	h.mu.Unlock()
	gs := prometheus.Gatherers{h.reg}
	if cur != nil {
		gs = append(gs, cur)
	}
	return gs.Gather()
}

// Registry returns the registry of process-wide metrics.
func (h *Host) Registry() *prometheus.Registry { return h.reg }

// attach makes g the chain registry served on /metrics; nil detaches.
func (h *Host) attach(g prometheus.Gatherer) {
	h.mu.Lock()
	h.current = g
	h.mu.Unlock()
}

// Handle adds an HTTP handler next to /metrics. Call it before Serve.
func (h *Host) Handle(pattern string, handler http.Handler) { h.mux.Handle(pattern, handler) }

// Serve starts answering HTTP; it returns at once. It does nothing without
// a metrics address or when already serving.
func (h *Host) Serve() {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.httpLn == nil || h.http != nil || h.closed {
		return
	}
	h.http = &http.Server{Handler: h.mux, ReadHeaderTimeout: 5 * time.Second}
	srv, ln := h.http, h.httpLn
	go func() { _ = srv.Serve(ln) }()
}

// MetricsURL returns the URL of /metrics, or "" without an HTTP server.
func (h *Host) MetricsURL() string {
	if h.addr == "" {
		return ""
	}
	return "http://" + h.addr + "/metrics"
}

// BaseURL returns the URL of the HTTP server's root, or "".
func (h *Host) BaseURL() string {
	if h.addr == "" {
		return ""
	}
	return "http://" + h.addr + "/"
}

// NATSURL returns the client URL of the embedded server.
func (h *Host) NATSURL() string { return h.srv.ClientURL() }

// NATS returns the embedded server.
func (h *Host) NATS() *server.Server { return h.srv }

// Close stops the HTTP and NATS servers. It is safe to call more than once.
func (h *Host) Close() {
	h.mu.Lock()
	h.closed = true
	srv, ln := h.http, h.httpLn
	h.http, h.httpLn = nil, nil
	h.mu.Unlock()
	if srv != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		_ = srv.Shutdown(ctx)
		cancel()
	} else if ln != nil {
		_ = ln.Close()
	}
	if h.srv != nil {
		h.srv.Shutdown()
		h.srv.WaitForShutdown()
		h.srv = nil
	}
}
