package cli

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"flag"
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
	"github.com/bunchsieve/bunchsieve/trigger"
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

// ctlNote closes the usage of every ctl action, with example the action
// as typed: the connection flags belong to ctl itself, so they go before
// the action.
func ctlNote(example string) string {
	return fmt.Sprintf("The connection flags (--addr, --token-file, --tls-ca, --timeout) go before the action, as in\n"+
		"bunchsieve ctl --addr %s %s; see bunchsieve ctl --help.", defaultControlAddr, example)
}

// ctlCall is a ctl action with its arguments parsed, ready to be sent.
type ctlCall struct {
	// auth is set for the calls that change the run: they carry the token.
	auth bool
	// do makes a unary call; nil for watch, which streams.
	do    func(context.Context, pb.RunControlClient) (*pb.RunStatus, error)
	watch *watchOptions
}

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
	// The action's own arguments are parsed before anything is read or
	// dialled, so that --help and mistakes never reach the server.
	c, err := ctlAction(e, rest[0], rest[1:])
	if err != nil {
		return err
	}
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
	if c.auth {
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
	if c.watch != nil {
		return watch(ctx, e, client, *c.watch)
	}
	call, cancel := context.WithTimeout(ctx, *timeout)
	defer cancel()
	st, err := c.do(call, client)
	if err != nil {
		return callError(*addr, err)
	}
	printStatus(e.stdout, st)
	return nil
}

// ctlAction parses the arguments of the ctl action named action. On
// --help it prints the action's usage and returns flag.ErrHelp.
func ctlAction(e *env, action string, args []string) (ctlCall, error) {
	noArgs := func(about string) error {
		return parse(newActionFlags(e, "ctl "+action, "", about, ctlNote(action)), args, 0)
	}
	switch action {
	case "status":
		if err := noArgs("Print the run's phase, run number, lumi slice, menu, prescale set and counts. Needs no token."); err != nil {
			return ctlCall{}, err
		}
		return ctlCall{do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.Status(ctx, &pb.StatusRequest{}, grpc.WaitForReady(false))
		}}, nil
	case "start":
		if err := noArgs("Start a run with the configured settings (see bunchsieve ctl configure --help)."); err != nil {
			return ctlCall{}, err
		}
		return ctlCall{auth: true, do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.Start(ctx, &pb.StartRequest{})
		}}, nil
	case "stop":
		if err := noArgs("Stop the run: offering stops and the crossings in flight drain."); err != nil {
			return ctlCall{}, err
		}
		return ctlCall{auth: true, do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.Stop(ctx, &pb.StopRequest{})
		}}, nil
	case "prescale":
		fs := newActionFlags(e, "ctl prescale", "SET",
			"Switch to the menu's prescale SET: from the next lumi slice while a run flows, from the next run\n"+
				"otherwise. Refused while draining.",
			ctlNote("prescale SET"))
		name, err := parseOne(fs, args, "ctl prescale takes one prescale set name")
		if err != nil {
			return ctlCall{}, err
		}
		return ctlCall{auth: true, do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: name})
		}}, nil
	case "menu":
		req, err := menuRequest(e, args)
		if err != nil {
			return ctlCall{}, err
		}
		return ctlCall{auth: true, do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.LoadMenu(ctx, req)
		}}, nil
	case "configure":
		req, err := configureRequest(e, args)
		if err != nil {
			return ctlCall{}, err
		}
		return ctlCall{auth: true, do: func(ctx context.Context, c pb.RunControlClient) (*pb.RunStatus, error) {
			return c.Configure(ctx, req)
		}}, nil
	case "watch":
		w, err := watchFlags(e, args)
		if err != nil {
			return ctlCall{}, err
		}
		return ctlCall{watch: &w}, nil
	default:
		return ctlCall{}, usagef("unknown action %q; use bunchsieve ctl %s", action, ctlUsage)
	}
}

// newActionFlags is newFlags for a subcommand of menu or ctl: the usage
// gives the command line, what the subcommand does, its flags when it
// has any, and a closing note (none when empty).
func newActionFlags(e *env, name, synopsis, about, note string) *flag.FlagSet {
	fs := newFlags(e, name, synopsis)
	fs.Usage = func() {
		fmt.Fprintf(e.stdout, "usage: bunchsieve %s\n\n%s\n", strings.TrimSpace(name+" "+synopsis), about)
		hasFlags := false
		fs.VisitAll(func(*flag.Flag) { hasFlags = true })
		if hasFlags {
			fmt.Fprintln(e.stdout, "\nflags:")
			fs.SetOutput(e.stdout)
			fs.PrintDefaults()
			fs.SetOutput(io.Discard)
		}
		if note != "" {
			fmt.Fprintf(e.stdout, "\n%s\n", note)
		}
	}
	return fs
}

// parseOne parses args that hold one positional argument, with flags
// before or after it (`ctl menu FILE --set NAME`, as the usage shows),
// and returns that argument; missing is the usage error without it.
func parseOne(fs *flag.FlagSet, args []string, missing string) (string, error) {
	if err := parse(fs, args, len(args)); err != nil {
		return "", err
	}
	if fs.NArg() == 0 {
		return "", usagef("%s", missing)
	}
	arg := fs.Arg(0)
	if err := parse(fs, fs.Args()[1:], 0); err != nil {
		return "", err
	}
	return arg, nil
}

func callError(addr string, err error) error {
	s := status.Convert(err)
	return fmt.Errorf("run control at %s: %s: %s", addr, strings.ToLower(s.Code().String()), s.Message())
}

func menuRequest(e *env, args []string) (*pb.LoadMenuRequest, error) {
	fs := newActionFlags(e, "ctl menu", "FILE [--set NAME]",
		"Validate the menu FILE and make it the menu: from the next lumi slice while a run flows, from\n"+
			"the next run otherwise. Without --set, a prescale set chosen earlier (ctl prescale, configure\n"+
			"or an earlier ctl menu --set) stays in force if FILE has it; else FILE's active set is taken.",
		ctlNote("menu FILE"))
	set := fs.String("set", "", "prescale set to take with the menu")
	file, err := parseOne(fs, args, "ctl menu takes one menu FILE")
	if err != nil {
		return nil, err
	}
	data, err := readMenu(file)
	if err != nil {
		return nil, err
	}
	return &pb.LoadMenuRequest{Menu: string(data), PrescaleSet: *set}, nil
}

// readMenu reads a menu file and parses it here first, so that a mistake
// is reported at its FILE:LINE:COL (the server, which sees only the text,
// would name no file); the server validates it again.
func readMenu(file string) ([]byte, error) {
	data, err := os.ReadFile(file)
	if err != nil {
		return nil, err
	}
	if _, err := trigger.ParseMenu(file, data); err != nil {
		return nil, err
	}
	return data, nil
}

func configureRequest(e *env, args []string) (*pb.ConfigureRequest, error) {
	fs := newActionFlags(e, "ctl configure", "[flags]",
		"Set what the next run takes; a flag left out keeps the server's setting.", ctlNote("configure --rate 5000"))
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
		data, err := readMenu(*menu)
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
		phaseName(st.Phase), st.Run, st.LumiSlice, st.MenuName, st.MenuHash, prescaleSetLabel(st))
	if st.PendingMenuHash != "" || st.PendingPrescaleSet != "" {
		fmt.Fprintf(w, "waiting for the next lumi slice: menu %s prescale set %s\n", orDash(st.PendingMenuHash), orDash(st.PendingPrescaleSet))
	}
	fmt.Fprintf(w, "crossings %d  built %d  accepted %d  up %.0fs\n", st.Crossings, st.EventsBuilt, st.Accepted, st.UptimeS)
	if st.Detail != "" {
		fmt.Fprintln(w, st.Detail)
	}
}

// prescaleSetLabel names the prescale set of st. Between runs the server
// reports none when the next run will take the menu's active set, whose
// name only the menu knows.
func prescaleSetLabel(st *pb.RunStatus) string {
	switch {
	case st.PrescaleSet != "":
		return st.PrescaleSet
	case st.MenuHash != "":
		return "(menu default)"
	}
	return "-"
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// watchOptions are the arguments of ctl watch.
type watchOptions struct {
	every time.Duration
	count int
}

func watchFlags(e *env, args []string) (watchOptions, error) {
	fs := newActionFlags(e, "ctl watch", "[--interval D] [--count N]",
		"Print the accept rate and every rule's pass and accept rates at each interval, until\n"+
			"interrupted or --count updates. Needs no token.",
		ctlNote("watch"))
	every := fs.Duration("interval", time.Second, "time between updates")
	count := fs.Int("count", 0, "stop after N updates (0: until interrupted)")
	if err := parse(fs, args, 0); err != nil {
		return watchOptions{}, err
	}
	if *every < 50*time.Millisecond {
		return watchOptions{}, usagef("--interval %v: want at least 50ms", *every)
	}
	return watchOptions{every: *every, count: *count}, nil
}

func watch(ctx context.Context, e *env, client pb.RunControlClient, w watchOptions) error {
	stream, err := client.WatchRates(ctx, &pb.WatchRatesRequest{IntervalMs: uint32(w.every.Milliseconds())})
	if err != nil {
		return callError("run control", err)
	}
	for n := 0; w.count == 0 || n < w.count; n++ {
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
