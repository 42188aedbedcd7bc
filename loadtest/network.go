package loadtest

import (
	"errors"
	"fmt"
	"log"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"

	"github.com/bunchsieve/bunchsieve/services/transport"
)

// Network is where a load test's connections go: an embedded server
// reached in-process, an external deployment reached by URL, or a cluster
// of in-process servers reached over loopback TCP. Its methods are safe
// for concurrent use; Close is safe to call more than once.
type Network struct {
	// Kind is "in-process", "tcp" or "cluster".
	Kind string
	// URLs are the client URLs connections are spread over (none for
	// in-process).
	URLs []string

	srvs []*server.Server
	mu   sync.Mutex
	next int
	once sync.Once
}

// Embedded starts an embedded NATS server on a free loopback port and
// connects in-process, as `bunchsieve up` does.
func Embedded() (*Network, error) {
	srv, err := transport.Embedded("127.0.0.1", -1)
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	return &Network{Kind: "in-process", srvs: []*server.Server{srv}}, nil
}

// EmbeddedStore is Embedded with JetStream on, storing in dir, for a
// load test with the durable capture (Config.Capture).
func EmbeddedStore(dir string) (*Network, error) {
	srv, err := transport.EmbeddedWith(transport.EmbeddedOptions{Port: -1, StoreDir: dir, MaxStore: 8 << 30})
	if err != nil {
		return nil, fmt.Errorf("loadtest: %w", err)
	}
	return &Network{Kind: "in-process", srvs: []*server.Server{srv}}, nil
}

// External connects to a running NATS deployment at url over TCP; a
// comma-separated list names several servers of one cluster, which
// connections take in turn.
func External(url string) (*Network, error) {
	if url == "" {
		return nil, errors.New("loadtest: empty NATS URL")
	}
	return &Network{Kind: "tcp", URLs: strings.Split(url, ",")}, nil
}

// Cluster starts n NATS servers on loopback, clustered: a seed on a free
// cluster port and the others with a route to it. It returns once every
// server has a route to every other (Start returning does not mean the
// routes are up), or fails after timeout. Connections go over TCP, each to
// the next server in turn.
func Cluster(n int, timeout time.Duration) (*Network, error) {
	if n < 2 {
		return nil, fmt.Errorf("loadtest: a cluster of %d servers, want at least 2", n)
	}
	nw := &Network{Kind: "cluster"}
	opts := func(i int) *server.Options {
		return &server.Options{
			ServerName: fmt.Sprintf("loadtest-%d", i),
			Host:       "127.0.0.1",
			Port:       -1,
			NoLog:      !transport.LogServers(),
			NoSigs:     true,
			MaxPayload: 8 << 20,
			MaxPending: 256 << 20,
			Cluster:    server.ClusterOpts{Name: "loadtest", Host: "127.0.0.1", Port: -1},
		}
	}
	start := func(o *server.Options) (*server.Server, error) {
		s, err := server.NewServer(o)
		if err != nil {
			return nil, fmt.Errorf("loadtest: cluster server: %w", err)
		}
		if transport.LogServers() {
			s.ConfigureLogger()
		}
		s.Start()
		if !s.ReadyForConnections(timeout) {
			s.Shutdown()
			return nil, fmt.Errorf("loadtest: cluster server %s did not become ready", o.ServerName)
		}
		return s, nil
	}
	seed, err := start(opts(0))
	if err != nil {
		return nil, err
	}
	nw.srvs = append(nw.srvs, seed)
	route := server.RoutesFromStr(fmt.Sprintf("nats://127.0.0.1:%d", seed.ClusterAddr().Port))
	for i := 1; i < n; i++ {
		o := opts(i)
		o.Routes = route
		s, err := start(o)
		if err != nil {
			nw.Close()
			return nil, err
		}
		nw.srvs = append(nw.srvs, s)
	}
	deadline := time.Now().Add(timeout)
	for {
		formed := true
		for _, s := range nw.srvs {
			if s.NumRoutes() < n-1 {
				formed = false
			}
		}
		if formed {
			break
		}
		if time.Now().After(deadline) {
			nw.Close()
			return nil, fmt.Errorf("loadtest: cluster of %d did not form within %v", n, timeout)
		}
		time.Sleep(10 * time.Millisecond)
	}
	for _, s := range nw.srvs {
		nw.URLs = append(nw.URLs, s.ClientURL())
	}
	return nw, nil
}

// Connect opens a connection for a component named name: in-process to
// the embedded server, or to the next URL in turn.
//
// A subscriber that falls behind has messages dropped, which the services
// and the baselines count (Subscription.Dropped) and the report shows; the
// connection's error handler stays quiet about those instead of printing a
// line per episode, and prints other asynchronous errors as NATS does.
func (nw *Network) Connect(name string) (*nats.Conn, error) {
	var nc *nats.Conn
	var err error
	if nw.Kind == "in-process" {
		nc, err = transport.ConnectInProcess(nw.srvs[0], name)
	} else {
		nw.mu.Lock()
		url := nw.URLs[nw.next%len(nw.URLs)]
		nw.next++
		nw.mu.Unlock()
		nc, err = transport.Connect(url, name)
	}
	if err != nil {
		return nil, err
	}
	nc.SetErrorHandler(func(c *nats.Conn, _ *nats.Subscription, err error) {
		if !errors.Is(err, nats.ErrSlowConsumer) {
			log.Printf("loadtest: NATS connection %s: %v", c.Opts.Name, err)
		}
	})
	return nc, nil
}

// AwaitInterest waits until every server the Network started knows of a
// subscription matching each of subjects, or fails after timeout. A
// subscription is confirmed by its own server at once (a Flush), but the
// other members of a cluster learn of it over their routes a moment
// later, and a publish to a member that has not yet heard of it reaches
// nobody: a short run could offer everything before then. For an
// external deployment it cannot look and returns at once.
func (nw *Network) AwaitInterest(subjects []string, timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	for _, s := range nw.srvs {
		acc := s.GlobalAccount()
		for _, subj := range subjects {
			for !acc.SubscriptionInterest(subj) {
				if time.Now().After(deadline) {
					return fmt.Errorf("loadtest: server %s learnt of no subscriber to %s within %v", s.Name(), subj, timeout)
				}
				time.Sleep(time.Millisecond)
			}
		}
	}
	return nil
}

// RoutedMessages returns how many messages the servers the Network
// started have received from each other over their routes: zero but for a
// cluster.
func (nw *Network) RoutedMessages() int64 {
	var n int64
	for _, s := range nw.srvs {
		rz, err := s.Routez(&server.RoutezOptions{})
		if err != nil {
			continue
		}
		for _, r := range rz.Routes {
			n += r.InMsgs
		}
	}
	return n
}

// Describe returns the kind and, over TCP, the URLs.
func (nw *Network) Describe() string {
	if len(nw.URLs) == 0 {
		return nw.Kind
	}
	return nw.Kind + " " + strings.Join(nw.URLs, ",")
}

// Close shuts down the servers the Network started.
func (nw *Network) Close() {
	nw.once.Do(func() {
		for _, s := range nw.srvs {
			s.Shutdown()
			s.WaitForShutdown()
		}
	})
}
