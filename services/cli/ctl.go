package cli

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"io"
	"os"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// tokenCreds attaches the bearer token to each call. Over plaintext it is
// allowed only because run control listens on loopback by default; use
// --tls-ca against a remote server.
type tokenCreds struct {
	token  string
	secure bool
}

func (t tokenCreds) GetRequestMetadata(context.Context, ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + t.token}, nil
}

func (t tokenCreds) RequireTransportSecurity() bool { return t.secure }

const ctlUsage = "status | configure [--run N --seed S --sources N --rate HZ --crossings N --duration D --menu FILE --set NAME] | start | stop | menu FILE [--set NAME] | prescale SET | watch [--interval D] [--count N]"

func runCtl(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "ctl", "[flags] "+ctlUsage)
	addr := fs.String("addr", defaultControlAddr, "`host:port` of the run-control service")
	tokenFile := fs.String("token-file", defaultTokenFile, "`FILE` holding the run-control token (or set "+tokenEnv+")")
	caFile := fs.String("tls-ca", "", "verify the server's TLS certificate against this CA `FILE` (PEM); default plaintext")
	timeout := fs.Duration("timeout", 5*time.Second, "deadline of each call (not of watch)")
	if err := parse(fs, args, 1<<20); err != nil {
		return err
	}
	rest := fs.Args()
	if len(rest) == 0 {
		return usagef("missing action; use bunchsieve ctl %s", ctlUsage)
	}
	action, rest := rest[0], rest[1:]
	creds := insecure.NewCredentials()
	secure := false
	if *caFile != "" {
		pem, err := os.ReadFile(*caFile)
		if err != nil {
			return err
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return fmt.Errorf("--tls-ca %s: no certificate found", *caFile)
		}
		creds = credentials.NewTLS(&tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12})
		secure = true
	}
	opts := []grpc.DialOption{grpc.WithTransportCredentials(creds)}
	if action != "status" && action != "watch" {
		token, err := readToken(*tokenFile)
		if err != nil {
			return err
		}
		opts = append(opts, grpc.WithPerRPCCredentials(tokenCreds{token: token, secure: secure}))
	}
	conn, err := grpc.NewClient(*addr, opts...)
	if err != nil {
		return fmt.Errorf("run control at %s: %w", *addr, err)
	}
	defer conn.Close()
	client := pb.NewRunControlClient(conn)
	call, cancel := context.WithTimeout(ctx, *timeout)
	defer cancel()
	var st *pb.RunStatus
	switch action {
	case "status":
		st, err = client.Status(call, &pb.StatusRequest{}, grpc.WaitForReady(false))
	case "start":
		st, err = client.Start(call, &pb.StartRequest{})
	case "stop":
		st, err = client.Stop(call, &pb.StopRequest{})
	case "prescale":
		if len(rest) != 1 {
			return usagef("ctl prescale takes one prescale set name")
		}
		st, err = client.SetPrescaleSet(call, &pb.SetPrescaleSetRequest{PrescaleSet: rest[0]})
	case "menu":
		req, err2 := menuRequest(e, rest)
		if err2 != nil {
			return err2
		}
		st, err = client.LoadMenu(call, req)
	case "configure":
		req, err2 := configureRequest(e, rest)
		if err2 != nil {
			return err2
		}
		st, err = client.Configure(call, req)
	case "watch":
		return watch(ctx, e, client, rest)
	default:
		return usagef("unknown action %q; use bunchsieve ctl %s", action, ctlUsage)
	}
	if err != nil {
		return callError(*addr, err)
	}
	printStatus(e.stdout, st)
	return nil
}

func callError(addr string, err error) error {
	s := status.Convert(err)
	return fmt.Errorf("run control at %s: %s: %s", addr, strings.ToLower(s.Code().String()), s.Message())
}

func menuRequest(e *env, args []string) (*pb.LoadMenuRequest, error) {
	fs := newFlags(e, "ctl menu", "FILE [--set NAME]")
	set := fs.String("set", "", "prescale set to take with the menu")
	if err := parse(fs, args, 1); err != nil {
		return nil, err
	}
	if fs.NArg() != 1 {
		return nil, usagef("ctl menu takes one menu FILE")
	}
	data, err := os.ReadFile(fs.Arg(0))
	if err != nil {
		return nil, err
	}
	return &pb.LoadMenuRequest{Menu: string(data), PrescaleSet: *set}, nil
}

func configureRequest(e *env, args []string) (*pb.ConfigureRequest, error) {
	fs := newFlags(e, "ctl configure", "[flags]")
	run := fs.Uint("run", 0, "run number (0 keeps the server's)")
	seed := fs.Uint64("seed", 0, "generator seed (0 keeps the server's)")
	sources := fs.Uint("sources", 0, "calorimeter sources (0 keeps the server's)")
	rate := fs.Float64("rate", 0, "offered crossings per second (0 keeps the server's)")
	crossings := fs.Uint64("crossings", 0, "end each run after N crossings (0: flow until stop)")
	duration := fs.Duration("duration", 0, "end each run after this long (0: flow until stop)")
	menu := fs.String("menu", "", "menu `FILE` (empty keeps the server's)")
	set := fs.String("set", "", "prescale set to start with")
	if err := parse(fs, args, 0); err != nil {
		return nil, err
	}
	if *rate < 0 || *duration < 0 {
		return nil, usagef("--rate and --duration must not be negative")
	}
	req := &pb.ConfigureRequest{Run: uint32(*run), Seed: *seed, Sources: uint32(*sources), RateHz: *rate,
		Crossings: *crossings, DurationS: duration.Seconds(), PrescaleSet: *set}
	if *menu != "" {
		data, err := os.ReadFile(*menu)
		if err != nil {
			return nil, err
		}
		req.Menu = string(data)
	}
	return req, nil
}

func phaseName(p pb.RunPhase) string {
	return strings.ToLower(strings.TrimPrefix(p.String(), "RUN_PHASE_"))
}

func printStatus(w io.Writer, st *pb.RunStatus) {
	fmt.Fprintf(w, "phase %s  run %d  lumi slice %d  menu %s (%s)  prescale set %s\n",
		phaseName(st.Phase), st.Run, st.LumiSlice, st.MenuName, st.MenuHash, st.PrescaleSet)
	if st.PendingMenuHash != "" || st.PendingPrescaleSet != "" {
		fmt.Fprintf(w, "waiting for the next lumi slice: menu %s prescale set %s\n", orDash(st.PendingMenuHash), orDash(st.PendingPrescaleSet))
	}
	fmt.Fprintf(w, "crossings %d  built %d  accepted %d  up %.0fs\n", st.Crossings, st.EventsBuilt, st.Accepted, st.UptimeS)
	if st.Detail != "" {
		fmt.Fprintln(w, st.Detail)
	}
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func watch(ctx context.Context, e *env, client pb.RunControlClient, args []string) error {
	fs := newFlags(e, "ctl watch", "[--interval D] [--count N]")
	every := fs.Duration("interval", time.Second, "time between updates")
	count := fs.Int("count", 0, "stop after N updates (0: until interrupted)")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	if *every < 50*time.Millisecond {
		return usagef("--interval %v: want at least 50ms", *every)
	}
	stream, err := client.WatchRates(ctx, &pb.WatchRatesRequest{IntervalMs: uint32(every.Milliseconds())})
	if err != nil {
		return callError("run control", err)
	}
	for n := 0; *count == 0 || n < *count; n++ {
		up, err := stream.Recv()
		if err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return callError("run control", err)
		}
		tw := tabwriter.NewWriter(e.stdout, 2, 0, 2, ' ', 0)
		fmt.Fprintf(tw, "%s  lumi slice %d  accepted %.1f Hz\n", time.Unix(0, up.UnixNs).Format("15:04:05"), up.LumiSlice, up.AcceptedHz)
		for _, r := range up.Rules {
			fmt.Fprintf(tw, "  %s\tpassed %.1f Hz\taccepted %.1f Hz\n", r.Rule, r.PassedHz, r.AcceptedHz)
		}
		tw.Flush()
	}
	return nil
}
