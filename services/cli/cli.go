// Package cli is the bunchsieve command line: it parses subcommands and
// flags into service configurations and runs them. main only calls Main.
package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"sort"
	"strings"
	"syscall"
)

// command is one subcommand.
type command struct {
	name    string
	summary string
	run     func(ctx context.Context, env *env, args []string) error
}

// env is what a command writes to.
type env struct {
	stdout, stderr io.Writer
}

var commands = []command{
	{"up", "run the whole chain on an embedded NATS server and print a summary", runUp},
	{"serve", "run the chain under gRPC run control, with the operator page (configure/start/stop with bunchsieve ctl)", runServe},
	{"ctl", "steer a served chain: ctl status|configure|start|stop|menu FILE|prescale SET|watch", runCtl},
	{"readout", "run the readout emulator against a NATS server", runReadout},
	{"build", "run the event builder against a NATS server", runBuild},
	{"select", "run the selection against a NATS server", runSelect},
	{"record", "write generated crossings to a stream file for later replay", runRecord},
	{"capture", "record the readout's fragments durably in JetStream on the NATS deployment and save a run to a stream file", runCapture},
	{"replay", "replay a stream or generated crossings through a menu and write the rates and efficiency report", runReplay},
	{"loadtest", "measure throughput, latency and loss of builder and selection through NATS against the raw-transport ceiling", runLoadtest},
	{"menu", "work with menus: `menu check FILE` validates one and lists its rules", runMenu},
	{"version", "print the version", func(_ context.Context, e *env, _ []string) error {
		fmt.Fprintln(e.stdout, "bunchsieve", Version)
		return nil
	}},
}

// Version is the program version, set at build time with -ldflags.
var Version = "dev"

func readFile(path string) ([]byte, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return data, nil
}

// usageError is a mistake in how the command was called; Main prints it on
// one line and exits with status 2.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func usagef(format string, a ...any) error { return &usageError{fmt.Sprintf(format, a...)} }

// Main runs the command line args (without the program name) and returns
// the exit status. SIGINT and SIGTERM end the run gracefully: offering
// stops, in-flight crossings drain, and the summary is printed.
func Main(args []string, stdout, stderr io.Writer) int {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	return run(ctx, args, stdout, stderr)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	e := &env{stdout: stdout, stderr: stderr}
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		printHelp(stdout)
		return 0
	}
	for _, c := range commands {
		if c.name == args[0] {
			err := c.run(ctx, e, args[1:])
			return report(stderr, c.name, err)
		}
	}
	return report(stderr, "", usagef("unknown command %q; commands are %s (see bunchsieve help)", args[0], commandNames()))
}

func report(w io.Writer, name string, err error) int {
	if err == nil || errors.Is(err, flag.ErrHelp) {
		return 0
	}
	prefix := "bunchsieve"
	if name != "" {
		prefix += " " + name
	}
	msg := strings.ReplaceAll(err.Error(), "\n", "; ")
	fmt.Fprintf(w, "%s: %s\n", prefix, msg)
	var ue *usageError
	if errors.As(err, &ue) {
		return 2
	}
	return 1
}

func commandNames() string {
	names := make([]string, len(commands))
	for i, c := range commands {
		names[i] = c.name
	}
	sort.Strings(names)
	return strings.Join(names, ", ")
}

func printHelp(w io.Writer) {
	fmt.Fprintln(w, "bunchsieve: streaming event building and selection for collider trigger menus")
	fmt.Fprintln(w, "\nusage: bunchsieve COMMAND [flags]   (bunchsieve COMMAND --help lists a command's flags)")
	fmt.Fprintln(w, "\ncommands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
}

// newFlags returns a flag set that reports errors as one-line usage errors
// instead of printing the usage text, and prints the usage on --help.
func newFlags(e *env, name, synopsis string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	fs.Usage = func() {
		fmt.Fprintf(e.stdout, "usage: bunchsieve %s %s\n\nflags:\n", name, synopsis)
		fs.SetOutput(e.stdout)
		fs.PrintDefaults()
		fs.SetOutput(io.Discard)
	}
	return fs
}

// parse parses args; a flag error becomes a usage error of one line, and
// leftover arguments are refused unless allowed.
func parse(fs *flag.FlagSet, args []string, positional int) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err // the flag set has printed the usage
		}
		return usagef("%s (see bunchsieve %s --help)", err, fs.Name())
	}
	if fs.NArg() > positional {
		return usagef("unexpected argument %q (see bunchsieve %s --help)", fs.Arg(positional), fs.Name())
	}
	return nil
}

// setFlags returns the names of the flags given on the command line.
func setFlags(fs *flag.FlagSet) map[string]bool {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	return set
}
