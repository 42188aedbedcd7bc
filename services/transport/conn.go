package transport

import (
	"errors"
	"fmt"
	"os"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// Pending limits for our subscriptions. The library default (500,000
// messages, 64 MiB) is set explicitly and raised: a batch carries many
// fragments, so bytes bind first. Whatever still overflows is counted via
// Subscription.Dropped, never lost silently.
const (
	PendingMsgs  = 1 << 20
	PendingBytes = 1 << 30
)

// writeBuffer is the size of every connection's write buffer, raised from
// the client's 32 KiB: a built-event batch of 64 crossings is larger than
// that, so publishing one wrote through to the server inline and held
// the builder while its queue grew (measured in docs/performance.md,
// "The targets"). The raw-transport baselines connect here too.
const writeBuffer = 256 << 10

// Connect opens a connection to url for a stage named name. It fails fast
// (2 s) when the server cannot be reached instead of retrying for ever.
func Connect(url, name string) (*nats.Conn, error) {
	if url == "" {
		return nil, errors.New("transport: empty NATS URL")
	}
	nc, err := nats.Connect(url,
		nats.Name(name),
		nats.Timeout(2*time.Second),
		nats.RetryOnFailedConnect(false),
		nats.MaxReconnects(60),
		nats.ReconnectWait(500*time.Millisecond),
		nats.PingInterval(5*time.Second),
		nats.ReconnectBufSize(64<<20),
		nats.WriteBufferSize(writeBuffer),
	)
	if err != nil {
		return nil, fmt.Errorf("transport: connect to %s: %w", url, err)
	}
	return nc, nil
}

// ConnectInProcess connects to an embedded server without TCP.
func ConnectInProcess(srv *server.Server, name string) (*nats.Conn, error) {
	nc, err := nats.Connect("", nats.InProcessServer(srv), nats.Name(name), nats.ReconnectBufSize(64<<20), nats.WriteBufferSize(writeBuffer))
	if err != nil {
		return nil, fmt.Errorf("transport: in-process connection %s: %w", name, err)
	}
	return nc, nil
}

// Embedded starts an in-process NATS server listening on host:port of the
// loopback interface (port -1 picks a free port). Call Shutdown and
// WaitForShutdown on the result when done.
func Embedded(host string, port int) (*server.Server, error) {
	return EmbeddedWith(EmbeddedOptions{Host: host, Port: port})
}

// EmbeddedOptions configure an embedded server.
type EmbeddedOptions struct {
	// Host and Port are where it listens (see Embedded).
	Host string
	Port int
	// StoreDir, when not empty, enables JetStream with its file store in
	// that directory (services/capture keeps fragment streams there).
	StoreDir string
	// MaxStore caps the file store in bytes; zero means 4 GiB.
	MaxStore int64
}

// LogServerEnv is the environment variable that, set to 1, makes the
// embedded NATS servers log to standard error (they are silent
// otherwise), for looking into a test or a run.
const LogServerEnv = "BUNCHSIEVE_NATS_LOG"

// LogServers reports whether LogServerEnv asks the embedded servers to
// log.
func LogServers() bool { return os.Getenv(LogServerEnv) == "1" }

// embeddedMaxMemory caps JetStream's memory store: its default takes most
// of the machine's RAM, and nothing here uses memory storage.
const embeddedMaxMemory = 64 << 20

// EmbeddedWith starts an embedded server as o says.
func EmbeddedWith(o EmbeddedOptions) (*server.Server, error) {
	host := o.Host
	if host == "" {
		host = "127.0.0.1"
	}
	opts := &server.Options{
		ServerName: "bunchsieve-embedded",
		Host:       host,
		Port:       o.Port,
		NoLog:      !LogServers(),
		NoSigs:     true,
		MaxPayload: 8 << 20,
		// A selection or builder that falls behind for a moment should be
		// buffered, not cut off.
		MaxPending: 256 << 20,
	}
	if o.StoreDir != "" {
		opts.JetStream = true
		opts.StoreDir = o.StoreDir
		opts.JetStreamMaxMemory = embeddedMaxMemory
		opts.JetStreamMaxStore = o.MaxStore
		if opts.JetStreamMaxStore == 0 {
			opts.JetStreamMaxStore = 4 << 30
		}
	}
	srv, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("transport: embedded NATS server: %w", err)
	}
	if LogServers() {
		srv.ConfigureLogger()
	}
	srv.Start()
	if !srv.ReadyForConnections(5 * time.Second) {
		srv.Shutdown()
		return nil, fmt.Errorf("transport: embedded NATS server on %s:%d did not become ready", host, o.Port)
	}
	return srv, nil
}

// Subscribe subscribes with raised pending limits (see PendingMsgs).
func Subscribe(nc *nats.Conn, subject, queue string, h nats.MsgHandler) (*nats.Subscription, error) {
	var sub *nats.Subscription
	var err error
	if queue == "" {
		sub, err = nc.Subscribe(subject, h)
	} else {
		sub, err = nc.QueueSubscribe(subject, queue, h)
	}
	if err != nil {
		return nil, fmt.Errorf("transport: subscribe %s: %w", subject, err)
	}
	if err := sub.SetPendingLimits(PendingMsgs, PendingBytes); err != nil {
		_ = sub.Unsubscribe()
		return nil, fmt.Errorf("transport: pending limits on %s: %w", subject, err)
	}
	return sub, nil
}

// SubscribeQueued subscribes with the messages delivered into ch, for a
// consumer that takes whatever has queued up in one go (under one lock and
// one clock reading) instead of one callback per message. ch's capacity is
// the pending limit: a message arriving to a full channel is dropped by
// the client and counted in Subscription.Dropped, as with the limits of
// Subscribe. An empty queue means no queue group. It is safe for
// concurrent use, as the connection is.
func SubscribeQueued(nc *nats.Conn, subject, queue string, ch chan *nats.Msg) (*nats.Subscription, error) {
	var sub *nats.Subscription
	var err error
	if queue == "" {
		sub, err = nc.ChanSubscribe(subject, ch)
	} else {
		sub, err = nc.ChanQueueSubscribe(subject, queue, ch)
	}
	if err != nil {
		return nil, fmt.Errorf("transport: subscribe %s: %w", subject, err)
	}
	return sub, nil
}
