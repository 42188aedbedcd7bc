package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"slices"
	"strings"
	"syscall"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/bunchsieve/bunchsieve/services/capture"
	"github.com/bunchsieve/bunchsieve/services/recording"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/transport"
)

const captureUsage = `usage: bunchsieve capture open|save|remove [flags]

Durable recording on the NATS deployment: a JetStream stream stores every fragment batch the
readout publishes, whatever any recorder does, and save writes one run of it to a stream file
for replay, loadtest --stream or readout --replay. The server needs JetStream enabled.

subcommands:
  open    create the stream for the subject prefix (before the run; nothing is stored without it)
  save    write one run from the stream into a stream FILE; exit status 1 if any batch is missing
  remove  delete the stream and everything it stored

See bunchsieve capture SUBCOMMAND --help.`

func runCapture(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "capture", "SUBCOMMAND")
	fs.Usage = func() { fmt.Fprintln(e.stdout, captureUsage) }
	if err := parse(fs, args, len(args)); err != nil {
		return err
	}
	args = fs.Args()
	if len(args) == 0 {
		return usagef("missing subcommand; use bunchsieve capture open|save|remove")
	}
	switch args[0] {
	case "open":
		return captureOpen(ctx, e, args[1:])
	case "save":
		return captureSave(ctx, e, args[1:])
	case "remove":
		return captureRemove(ctx, e, args[1:])
	default:
		return usagef("unknown capture subcommand %q; use open, save or remove", args[0])
	}
}

// captureFlags are the flags every capture subcommand takes.
type captureFlags struct {
	rf   runFlags
	url  *string
	name *string
}

func newCaptureFlags(e *env, sub, synopsis, about string, runFlagNames ...string) (*flag.FlagSet, *captureFlags) {
	fs := newActionFlags(e, "capture "+sub, synopsis, about, "")
	c := &captureFlags{}
	c.url = fs.String("nats", defaultNATS, "NATS server `URL` (comma-separated for several of one cluster)")
	c.name = fs.String("name", "", "stream `NAME` (default: the subject prefix, dots as underscores, then _fragments)")
	someRunFlags(fs, &c.rf, true, append([]string{"config", "subject-prefix"}, runFlagNames...)...)
	return fs, c
}

// connect resolves the configuration and returns it with a JetStream
// context on a new connection, and the stream's name.
func (c *captureFlags) connect(fs *flag.FlagSet, who string) (runconfig.Config, jetstream.JetStream, func(), string, error) {
	cfg, err := c.rf.resolve(setFlags(fs))
	if err != nil {
		return cfg, nil, nil, "", err
	}
	nc, err := transport.Connect(*c.url, who)
	if err != nil {
		return cfg, nil, nil, "", err
	}
	js, err := jetstream.New(nc)
	if err != nil {
		nc.Close()
		return cfg, nil, nil, "", fmt.Errorf("capture: %w", err)
	}
	name := *c.name
	if name == "" {
		name = capture.DefaultName(cfg.Subjects())
	}
	return cfg, js, nc.Close, name, nil
}

// captureTimeout bounds one request to the JetStream API.
const captureTimeout = 10 * time.Second

func captureOpen(ctx context.Context, e *env, args []string) error {
	fs, c := newCaptureFlags(e, "open", "[flags]",
		"Create the JetStream stream that stores every fragment batch published under the subject prefix\n"+
			"(file storage, so it survives a server restart), or confirm that it exists. Open it before the\n"+
			"readout starts: batches published before are not stored. A full stream refuses new batches, so\n"+
			"an overflowing recording shows as missing batches at its end when saved.")
	maxMiB := fs.Int64("max-mib", 0, "largest size of the stored batches in `MiB` (default: 8 GiB, or the largest share of that the server's store can hold)")
	replicas := fs.Int("replicas", 1, "servers of a cluster holding the stream (1..5)")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	if *maxMiB < 0 || (setFlags(fs)["max-mib"] && *maxMiB == 0) {
		return usagef("--max-mib %d: want >= 1", *maxMiB)
	}
	if *replicas < 1 || *replicas > 5 {
		return usagef("--replicas %d: want 1..5", *replicas)
	}
	cfg, js, closeConn, name, err := c.connect(fs, "bunchsieve-capture-open")
	if err != nil {
		return err
	}
	defer closeConn()
	ctx, cancel := context.WithTimeout(ctx, captureTimeout)
	defer cancel()
	st, created, err := capture.Open(ctx, js, capture.Options{Name: name, Subjects: cfg.Subjects(), MaxBytes: *maxMiB << 20, Replicas: *replicas})
	if err != nil {
		return err
	}
	info := st.CachedInfo()
	verb := "exists"
	if created {
		verb = "created"
	}
	fmt.Fprintf(e.stdout, "capture: stream %s %s, storing %s (%d batches, %.1f MiB stored so far, limit %.0f MiB, %d replica(s))\n",
		name, verb, strings.Join(info.Config.Subjects, ","), info.State.Msgs, float64(info.State.Bytes)/(1<<20),
		float64(info.Config.MaxBytes)/(1<<20), info.Config.Replicas)
	return nil
}

func captureSave(ctx context.Context, e *env, args []string) error {
	fs, c := newCaptureFlags(e, "save", "--out FILE [flags]",
		"Read the stream from its first batch and write one run into the stream FILE, byte for byte\n"+
			"as published. It stops when every source has sent its end-of-run batch to every builder share\n"+
			"and nothing more is stored, or when nothing new arrives for --idle; it may run during the run.\n"+
			"The file's header takes the detector description, generator settings, seed and sources from the\n"+
			"run configuration (--config, --seed, --sources), which should be the readout's. The file is\n"+
			"written as FILE.partial and renamed when the save ends; an interrupted save leaves FILE as it was.\n"+
			"Exit status 1 when a batch is missing, a source never ended, or batches do not fit the\n"+
			"configuration (the file is still written, with what was stored).",
		"sources", "seed")
	out := fs.String("out", "", "stream `FILE` to write")
	run := fs.Uint("run", 0, "run `NUMBER` to save (default: the run of the first stored batch)")
	builders := fs.Int("builders", 1, "number of builder shares the readout sent to")
	idle := fs.Duration("idle", 5*time.Second, "stop after this long with no new batch")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	if *out == "" {
		return usagef("--out FILE is required")
	}
	if *builders < 1 {
		return usagef("--builders %d: want >= 1", *builders)
	}
	if *idle <= 0 {
		return usagef("--idle %v: want a positive duration", *idle)
	}
	if *run > 1<<32-1 {
		return usagef("--run %d: out of range", *run)
	}
	if err := checkWritable(*out); err != nil {
		return err
	}
	cfg, js, closeConn, name, err := c.connect(fs, "bunchsieve-capture-save")
	if err != nil {
		return err
	}
	defer closeConn()
	_, sources, err := readoutSources(cfg)
	if err != nil {
		return err
	}
	res, dest, err := saveRun(ctx, js, cfg, capture.SaveOptions{
		Name: name, Subjects: cfg.Subjects(), Run: uint32(*run), Sources: sources, Partitions: *builders, Idle: *idle,
	}, *out)
	return reportSave(e, res, dest, err, fmt.Sprintf("capture: stream %s holds no batch of %s; nothing written", name, runWanted(*run)))
}

// reportSave prints what a save wrote into dest and gives the command's
// outcome: the save's error, none (the message when dest is empty, as no
// batch of the run was read), or the problems of an incomplete run.
func reportSave(e *env, res capture.Result, dest string, err error, none string) error {
	printSaved(e, res, dest)
	switch {
	case err != nil:
		return err
	case dest == "":
		return errors.New(none)
	case !res.Complete():
		return fmt.Errorf("capture: %s is incomplete: %s", dest, strings.Join(res.Problems(), "; "))
	}
	return nil
}

// saveRun saves one run of a stream into a stream file at path: written
// as path.partial, created when the run's first batch is read, and
// renamed to path when the save has run its course, so that an
// interrupted or failed save leaves whatever path held before. dest is
// the file that holds what was read: path, path.partial after a failure,
// or empty if no batch of the run was read.
func saveRun(ctx context.Context, js jetstream.JetStream, cfg runconfig.Config, o capture.SaveOptions, path string) (res capture.Result, dest string, err error) {
	var w *recording.Writer
	partial := path + ".partial"
	o.Create = func(run uint32) (capture.Writer, error) {
		h, err := streamHeader(cfg, o.Sources, o.Partitions, fmt.Sprintf("bunchsieve %s capture save of stream %s", Version, o.Name))
		if err != nil {
			return nil, err
		}
		h.Run = run
		if w, err = recording.Create(partial, h); err != nil {
			return nil, err
		}
		return w, nil
	}
	res, err = capture.Save(ctx, js, o)
	if w == nil {
		return res, "", err
	}
	if cerr := w.Close(); cerr != nil {
		return res, partial, errors.Join(err, cerr)
	}
	if err != nil {
		if ctx.Err() != nil {
			err = fmt.Errorf("capture: interrupted: the %d batches read so far are in %s; %s is unchanged", res.Batches, partial, path)
		}
		return res, partial, err
	}
	if err := os.Rename(partial, path); err != nil {
		return res, partial, fmt.Errorf("capture: %w", err)
	}
	return res, path, nil
}

// checkWritable fails now, before anything is read or run, if a stream
// file cannot be written at path (as path.partial, see saveRun).
func checkWritable(path string) error {
	f, err := os.Create(path + ".partial")
	if err != nil {
		return fmt.Errorf("capture: %w", err)
	}
	f.Close()
	return os.Remove(path + ".partial")
}

func runWanted(run uint) string {
	if run == 0 {
		return "any run"
	}
	return fmt.Sprintf("run %d", run)
}

// printSaved says what a save wrote into out; nothing if out is empty.
func printSaved(e *env, res capture.Result, out string) {
	if out == "" {
		return
	}
	state := "complete"
	if !res.Complete() {
		state = "INCOMPLETE"
	}
	fmt.Fprintf(e.stdout, "capture: run %d from stream %s: %d crossings, %d batches, %d fragments to %s; %d of %d source/share pairs ended; %s\n",
		res.Run, res.Stream, res.Crossings, res.Batches, res.Fragments, out, res.Ended, res.Expected, state)
	var notes []string
	if res.Duplicates > 0 {
		notes = append(notes, fmt.Sprintf("%d batches stored twice", res.Duplicates))
	}
	if res.Unexpected > 0 {
		notes = append(notes, fmt.Sprintf("%d batches of sources or shares the configuration does not have", res.Unexpected))
	}
	runs := make([]uint32, 0, len(res.OtherRuns))
	for run := range res.OtherRuns {
		runs = append(runs, run)
	}
	slices.Sort(runs)
	for _, run := range runs {
		notes = append(notes, fmt.Sprintf("%d batches of run %d skipped", res.OtherRuns[run], run))
	}
	if len(notes) > 0 {
		fmt.Fprintf(e.stdout, "capture: also %s\n", strings.Join(notes, ", "))
	}
}

func captureRemove(ctx context.Context, e *env, args []string) error {
	fs, c := newCaptureFlags(e, "remove", "[flags]", "Delete the stream and every batch it stored.")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	_, js, closeConn, name, err := c.connect(fs, "bunchsieve-capture-remove")
	if err != nil {
		return err
	}
	defer closeConn()
	ctx, cancel := context.WithTimeout(ctx, captureTimeout)
	defer cancel()
	if err := capture.Remove(ctx, js, name); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "capture: stream %s removed\n", name)
	return nil
}

// upCapture is `up --capture`: the stream on the embedded server, opened
// before the run, saved after it.
type upCapture struct {
	cfg     runconfig.Config
	sources []uint32
	nc      *nats.Conn
	js      jetstream.JetStream
}

// upCaptureBytes caps the stream of `up --capture`: 2 GiB, within the
// embedded server's 4 GiB store (about 11 minutes of the default readout
// at 5,000 crossings/s, 3.2 MB/s).
const upCaptureBytes = 2 << 30

func openUpCapture(srv *server.Server, cfg runconfig.Config) (*upCapture, error) {
	_, sources, err := readoutSources(cfg)
	if err != nil {
		return nil, err
	}
	nc, err := transport.ConnectInProcess(srv, "bunchsieve-capture")
	if err != nil {
		return nil, err
	}
	js, err := jetstream.New(nc)
	if err != nil {
		nc.Close()
		return nil, fmt.Errorf("capture: %w", err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), captureTimeout)
	defer cancel()
	if _, _, err := capture.Open(ctx, js, capture.Options{Subjects: cfg.Subjects(), MaxBytes: upCaptureBytes}); err != nil {
		nc.Close()
		return nil, err
	}
	return &upCapture{cfg: cfg, sources: sources, nc: nc, js: js}, nil
}

// save writes the run into path. It runs after the chain has drained, so
// an interrupted run is saved too (its readout ended every source); an
// interrupt during the save itself ends it.
func (u *upCapture) save(e *env, path string) error {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	res, dest, err := saveRun(ctx, u.js, u.cfg, capture.SaveOptions{
		Subjects: u.cfg.Subjects(), Sources: u.sources, Partitions: 1, Idle: 2 * time.Second,
	}, path)
	return reportSave(e, res, dest, err, fmt.Sprintf("capture: the run stored no batch; nothing written to %s", path))
}

func (u *upCapture) close() { u.nc.Close() }
