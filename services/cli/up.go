package cli

import (
	"context"
	"errors"
	"fmt"
	"net"
	"os"
	"strconv"

	"github.com/bunchsieve/bunchsieve/services/stack"
	"github.com/bunchsieve/bunchsieve/services/web"
)

func runUp(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "up", "[flags]")
	var rf runFlags
	rf.register(fs, "127.0.0.1:9310", true)
	fs.StringVar(&rf.menu, "menu", "", "menu `FILE` (default: the built-in examples/menus/starter.yaml)")
	natsListen := fs.String("nats-listen", "127.0.0.1:-1", "`host:port` of the embedded NATS server (port -1 picks a free one)")
	statusEvery := fs.Duration("status-every", 0, "interval of the status line; 0 takes the configuration's (1s)")
	quiet := fs.Bool("quiet", false, "print no status lines, only the summary")
	keep := fs.String("capture", "", "save the run into the stream `FILE` at the end, from a JetStream stream of the embedded server that stores every fragment batch the readout publishes (as capture open does on a deployment)")
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
	if set["status-every"] {
		if *statusEvery <= 0 {
			return usagef("--status-every %v: want a positive interval", *statusEvery)
		}
		cfg.StatusEvery = *statusEvery
	}
	cfg.Faults = append(cfg.Faults, faults...)
	host, portText, err := net.SplitHostPort(*natsListen)
	if err != nil {
		return usagef("--nats-listen %q: want host:port", *natsListen)
	}
	port, err := strconv.Atoi(portText)
	if err != nil || port < -1 || port > 65535 {
		return usagef("--nats-listen %q: port must be -1..65535", *natsListen)
	}
	if ip := net.ParseIP(host); host != "localhost" && (ip == nil || !ip.IsLoopback()) {
		return usagef("--nats-listen %q: the embedded server listens on loopback only", *natsListen)
	}
	opts := stack.Options{
		Run: cfg, Crossings: rf.crossings, Duration: rf.duration, MetricsAddr: rf.metrics,
		NATSHost: host, NATSPort: port,
	}
	if !*quiet {
		opts.Status = e.stdout
	}
	if *keep != "" {
		if err := checkWritable(*keep); err != nil {
			return err
		}
		store, err := os.MkdirTemp("", "bunchsieve-capture-")
		if err != nil {
			return fmt.Errorf("capture store: %w", err)
		}
		defer os.RemoveAll(store)
		opts.StoreDir = store
	}
	st, err := stack.New(opts)
	if err != nil {
		return err
	}
	defer st.Close()
	var kept *upCapture
	if *keep != "" {
		if kept, err = openUpCapture(st.Host().NATS(), cfg); err != nil {
			return err
		}
		defer kept.close()
	}
	st.Host().Handle("/", web.Handler(st.Page()))
	if !*quiet {
		limit := "until interrupted (Ctrl-C drains and prints the summary)"
		switch {
		case rf.crossings > 0:
			limit = fmt.Sprintf("for %d crossings", rf.crossings)
		case rf.duration > 0:
			limit = "for " + rf.duration.String()
		}
		fmt.Fprintf(e.stdout, "bunchsieve up: run %d, %d sources, %s crossings/s, %s; NATS %s; metrics %s\n",
			cfg.Run, cfg.Sources, rateText(cfg.RateHz), limit, st.NATSURL(), orNone(st.MetricsURL()))
	}
	sum, runErr := st.Run(ctx)
	sum.Print(e.stdout)
	if kept != nil {
		runErr = errors.Join(runErr, kept.save(e, *keep))
	}
	if rf.summary != "" {
		if err := sum.WriteJSON(rf.summary); err != nil {
			return err
		}
	}
	return runErr
}

func rateText(hz float64) string {
	if hz == 0 {
		return "max"
	}
	return strconv.FormatFloat(hz, 'f', -1, 64)
}

func orNone(s string) string {
	if s == "" {
		return "off"
	}
	return s
}
