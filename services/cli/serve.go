package cli

import (
	"context"
	"crypto/rand"
	"crypto/tls"
	"encoding/hex"
	"errors"
	"fmt"
	"net"
	"os"
	"strings"
	"time"

	"google.golang.org/grpc/credentials"

	"github.com/bunchsieve/bunchsieve/services/control"
	"github.com/bunchsieve/bunchsieve/services/stack"
	"github.com/bunchsieve/bunchsieve/services/web"
)

const (
	defaultControlAddr = "127.0.0.1:9320"
	defaultTokenFile   = "bunchsieve-control.token"
	tokenEnv           = "BUNCHSIEVE_CONTROL_TOKEN"
)

// readToken returns the run-control token from the environment or a file,
// trimmed of white space.
func readToken(path string) (string, error) {
	if t := strings.TrimSpace(os.Getenv(tokenEnv)); t != "" {
		return t, nil
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return "", fmt.Errorf("run-control token: %w (set %s or give --token-file)", err, tokenEnv)
	}
	t := strings.TrimSpace(string(data))
	if t == "" {
		return "", fmt.Errorf("run-control token file %s is empty", path)
	}
	return t, nil
}

// serverToken reads the token, or makes one and writes it to path (mode
// 0600) when neither the environment nor the file has one.
func serverToken(path string) (token string, made bool, err error) {
	if t, err := readToken(path); err == nil {
		return t, false, nil
	} else if !errors.Is(err, os.ErrNotExist) {
		return "", false, err
	}
	var b [24]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", false, err
	}
	token = hex.EncodeToString(b[:])
	if err := os.WriteFile(path, []byte(token+"\n"), 0o600); err != nil {
		return "", false, fmt.Errorf("write run-control token: %w", err)
	}
	return token, true, nil
}

func runServe(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "serve", "[flags]")
	var rf runFlags
	rf.register(fs, "127.0.0.1:9310", true)
	fs.StringVar(&rf.menu, "menu", "", "menu `FILE` of the first run (default: the built-in examples/menus/starter.yaml)")
	addr := fs.String("control", defaultControlAddr, "`host:port` of the gRPC run-control service")
	tokenFile := fs.String("token-file", defaultTokenFile, "`FILE` holding the run-control token; made (mode 0600) if missing and "+tokenEnv+" is unset")
	certFile := fs.String("tls-cert", "", "serve run control over TLS with this certificate `FILE` (PEM)")
	keyFile := fs.String("tls-key", "", "private key `FILE` (PEM) for --tls-cert")
	natsListen := fs.String("nats-listen", "127.0.0.1:-1", "`host:port` of the embedded NATS server")
	store := fs.String("jetstream-dir", "", "turn JetStream on in the embedded server with its store in `DIR`, so that `bunchsieve capture` can record the runs durably (docs/capture.md)")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	cfg, err := rf.resolve(setFlags(fs))
	if err != nil {
		return err
	}
	if err := checkHostPort("--control", *addr); err != nil {
		return err
	}
	if (*certFile == "") != (*keyFile == "") {
		return usagef("--tls-cert and --tls-key go together")
	}
	natsHost, natsPort, err := loopbackHostPort("--nats-listen", *natsListen)
	if err != nil {
		return err
	}
	var creds credentials.TransportCredentials
	if *certFile != "" {
		cert, err := tls.LoadX509KeyPair(*certFile, *keyFile)
		if err != nil {
			return fmt.Errorf("TLS: %w", err)
		}
		creds = credentials.NewTLS(&tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12})
	}
	menu, err := cfg.LoadMenu()
	if err != nil {
		return err
	}
	token, made, err := serverToken(*tokenFile)
	if err != nil {
		return err
	}
	host, err := stack.NewHost(stack.HostOptions{MetricsAddr: rf.metrics, NATSHost: natsHost, NATSPort: natsPort, StoreDir: *store})
	if err != nil {
		return err
	}
	defer host.Close()
	ctl := stack.NewController(host)
	if err := ctl.Configure(stack.RunSettings{Run: cfg, Menu: menu, Crossings: rf.crossings, Duration: rf.duration}); err != nil {
		return err
	}
	mountPage(host, ctl)
	host.Serve()
	gs, err := control.NewGRPC(ctl, control.Options{Token: token, Base: cfg, Creds: creds})
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", *addr)
	if err != nil {
		return fmt.Errorf("run-control address: %w", err)
	}
	go func() { _ = gs.Serve(ln) }()
	where := "token in " + *tokenFile
	if made {
		where = "new token written to " + *tokenFile
	} else if os.Getenv(tokenEnv) != "" {
		where = "token from " + tokenEnv
	}
	fmt.Fprintf(e.stdout, "bunchsieve serve: run control on %s (%s); page and metrics on %s; NATS %s; phase ready\n",
		ln.Addr(), where, orNone(host.BaseURL()), host.NATSURL())
	<-ctx.Done()
	fmt.Fprintln(e.stdout, "bunchsieve serve: stopping; draining any run in flight")
	drainCtx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	err = ctl.Close(drainCtx)
	stopped := make(chan struct{})
	go func() { gs.GracefulStop(); close(stopped) }()
	select {
	case <-stopped:
	case <-time.After(2 * time.Second):
		gs.Stop()
	}
	if sum := ctl.LastSummary(); sum != nil {
		sum.Print(e.stdout)
	}
	return err
}

// loopbackHostPort parses a listen address that must be on loopback.
func loopbackHostPort(flagName, v string) (string, int, error) {
	host, portText, err := net.SplitHostPort(v)
	if err != nil {
		return "", 0, usagef("%s %q: want host:port", flagName, v)
	}
	var port int
	if _, err := fmt.Sscan(portText, &port); err != nil || port < -1 || port > 65535 {
		return "", 0, usagef("%s %q: port must be -1..65535", flagName, v)
	}
	if ip := net.ParseIP(host); host != "localhost" && (ip == nil || !ip.IsLoopback()) {
		return "", 0, usagef("%s %q: the embedded server listens on loopback only", flagName, v)
	}
	return host, port, nil
}

// mountPage serves the operator page of a controlled host at /.
func mountPage(host *stack.Host, ctl *stack.Controller) {
	host.Handle("/", web.Handler(ctl.Page()))
}
