package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"runtime"
	"runtime/debug"
	"strconv"
	"strings"
	"time"

	"github.com/bunchsieve/bunchsieve/detector"
	"github.com/bunchsieve/bunchsieve/loadtest"
)

func runLoadtest(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "loadtest", "[flags]")
	var rf runFlags
	fs.StringVar(&rf.config, "config", "", "run configuration `FILE` for the generated stream (default: the built-in examples/run.yaml)")
	fs.IntVar(&rf.sources, "sources", 0, "calorimeter readout sources, 1..128 (default from the configuration: 16)")
	fs.Uint64Var(&rf.seed, "seed", 0, "generator seed (default from the configuration: 42)")
	fs.StringVar(&rf.menu, "menu", "", "menu `FILE` (default: the built-in examples/menus/starter.yaml)")
	fs.StringVar(&rf.prefix, "subject-prefix", "", "NATS subject prefix; each step adds its own token (default: loadtest)")
	stream := fs.String("stream", "", "replay the recorded stream `FILE` (bunchsieve record) instead of generating one")
	datasetN := fs.Uint64("dataset", 200_000, "crossings to generate before measuring; longer steps replay them in laps")
	batch := fs.Int("batch", 0, "crossings per fragment batch (default from the configuration: 32)")
	generator := fs.String("generator", "", "generator of the stream: simple (toy model) or physics (default from the configuration: simple)")
	url := fs.String("nats", "", "NATS server `URL` (comma-separated for several); empty starts an embedded server reached in-process")
	cluster := fs.Bool("cluster", false, "start three clustered NATS servers on loopback and connect over TCP (default --builders 2 --workers 2)")
	keep := fs.Bool("capture", false, "also store every step's fragment batches in a JetStream stream, as a deployment recording its runs would (docs/capture.md): on the embedded server in a temporary directory, or on the --nats deployment (JetStream on); a batch not stored counts as lost")
	builders := fs.Int("builders", 0, "builder instances sharing the crossings (default 1, or 2 with --cluster)")
	workers := fs.Int("workers", 0, "selection workers in the queue group (default GOMAXPROCS, or 2 with --cluster)")
	linger := fs.Duration("linger", 0, "how long the builders let a partly filled batch of built events wait for more, at most the builders' 2 ms tick (e.g. 1ms; pays with --batch 1)")
	rate := fs.String("rate", "", "one offered rate in crossings/s, e.g. 50000 or 50k; 0 = as fast as possible")
	rates := fs.String("rates", "", "offered rates, comma-separated (e.g. 20k,40k,60k) or a sweep FROM:TO:STEP (e.g. 20k:120k:10k); without --rate or --rates: "+defaultSweep)
	duration := fs.Duration("duration", 5*time.Second, "how long each fixed-rate step offers crossings")
	crossings := fs.Uint64("crossings", 0, "crossings of an as-fast-as-possible step and of the baselines (default: the dataset's)")
	refine := fs.Int("refine", 0, "bisection steps between the highest passing and the lowest failing rate")
	half := fs.Bool("half", false, "add a step at half the saturation rate")
	p99 := fs.Duration("p99", 20*time.Millisecond, "p99 latency bound a step must meet to count as keeping up")
	drain := fs.Duration("drain", 30*time.Second, "longest wait for in-flight events after a step stops offering")
	baselineRuns := fs.Int("baseline-runs", 3, "times to measure each raw-transport baseline; 0 skips them")
	baselineLength := fs.Duration("baseline-length", 2*time.Second, "about how long each baseline run lasts")
	soak := fs.Duration("soak", 0, "one step at --rate for this long, sampling memory every second (e.g. 10m)")
	jsonPath := fs.String("json", "", "write the report as JSON to `FILE`")
	pngPath := fs.String("png", "", "plot throughput and latency against the offered rate into `FILE` (PNG)")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the measured steps (no warm-up, spin test or baseline) to `FILE`")
	traceFile := fs.String("trace", "", "write an execution trace of the measured steps to `FILE` (go tool trace; large: keep steps short)")
	gogc := fs.Int("gogc", 100, "garbage collector target percentage during the test (as GOGC; 100 is Go's default)")
	quiet := fs.Bool("quiet", false, "no progress lines (they go to stderr, and only to a terminal)")
	if err := parse(fs, args, 0); err != nil {
		return err
	}
	set := setFlags(fs)
	// --rate, --duration and --crossings mean other things here than in
	// a run configuration.
	runSet := map[string]bool{}
	for k, v := range set {
		if k != "rate" && k != "duration" && k != "crossings" {
			runSet[k] = v
		}
	}
	cfg, err := rf.resolve(runSet)
	if err != nil {
		return err
	}
	switch {
	case *url != "" && *cluster:
		return usagef("--nats and --cluster exclude each other")
	case *keep && *cluster:
		return usagef("--capture needs JetStream, which the --cluster servers run without; use the embedded server or --nats")
	case *stream != "" && (set["sources"] || set["seed"] || set["batch"] || set["dataset"] || set["config"] || set["builders"] || set["generator"]):
		return usagef("--stream fixes the sources, seed, generator, batch size, builder shares and length; leave those flags out")
	case *datasetN == 0:
		return usagef("--dataset 0: want a positive number of crossings")
	case set["batch"] && (*batch < 1 || *batch > 4096):
		return usagef("--batch %d: want 1..4096", *batch)
	case *builders < 0 || *workers < 0 || *refine < 0 || *baselineRuns < 0:
		return usagef("--builders, --workers, --refine and --baseline-runs must not be negative")
	case *duration <= 0 || *p99 <= 0 || *drain <= 0 || *baselineLength <= 0:
		return usagef("--duration, --p99, --drain and --baseline-length must be positive")
	case *soak < 0:
		return usagef("--soak %v: want a positive duration", *soak)
	case *soak > 0 && (*rate == "" || set["rates"]):
		return usagef("--soak needs one --rate and no --rates")
	case *rate != "" && *rates != "":
		return usagef("--rate and --rates exclude each other")
	}
	var offered []float64
	if *rate != "" {
		r, err := parseRate(*rate)
		if err != nil {
			return usagef("--rate %q: %v", *rate, err)
		}
		offered = []float64{r}
	} else {
		spec := *rates
		if spec == "" {
			// A sweep, so that the plain command finds the saturation
			// point and has a curve to plot.
			spec = defaultSweep
		}
		if offered, err = parseRates(spec); err != nil {
			return usagef("--rates %q: %v", spec, err)
		}
	}
	if *soak > 0 && offered[0] == 0 {
		return usagef("--soak needs a fixed --rate, not 0")
	}
	if *builders == 0 {
		*builders = 1
		if *cluster {
			*builders = 2
		}
	}
	if *workers == 0 {
		*workers = runtime.GOMAXPROCS(0)
		if *cluster {
			*workers = 2
		}
	}
	menu, err := cfg.LoadMenu()
	if err != nil {
		return err
	}
	// Both files are created now, so that an unwritable path fails before
	// anything runs; they record the measured steps alone.
	prof, err := openCPUProfile(*cpuProfile)
	if err != nil {
		return err
	}
	defer prof.stop()
	tr, err := openTrace(*traceFile)
	if err != nil {
		return err
	}
	defer tr.stop()
	progress := io.Writer(nil)
	if !*quiet && isTerminal(e.stderr) {
		progress = e.stderr
	}

	prepStart := time.Now()
	var ds *loadtest.Dataset
	origin := ""
	if *stream != "" {
		if ds, err = loadtest.Load(*stream); err != nil {
			return err
		}
		origin = "file " + *stream
	} else {
		if *batch > 0 {
			cfg.BatchCrossings = *batch
		}
		if *generator != "" {
			if *generator != detector.GeneratorSimple && *generator != detector.GeneratorPhysics {
				return usagef("--generator %q: want simple or physics", *generator)
			}
			cfg.Generator.Kind = *generator
		}
		desc, err := cfg.LoadDetector()
		if err != nil {
			return err
		}
		if progress != nil {
			fmt.Fprintf(progress, "generating %d crossings x %d sources...", *datasetN, cfg.Sources)
		}
		ds, err = loadtest.Generate(loadtest.GenerateConfig{
			Description: desc, Sources: cfg.Sources, Crossings: *datasetN, BatchCrossings: cfg.BatchCrossings,
			Partitions: *builders, Run: cfg.Run, Seed: cfg.Seed, Generator: cfg.Generator,
		})
		if err != nil {
			return err
		}
		kind := cfg.Generator.Kind
		if kind == "" {
			kind = detector.GeneratorSimple
		}
		origin = fmt.Sprintf("generated (%s generator, seed %d, %d crossings/batch)", kind, cfg.Seed, cfg.BatchCrossings)
	}
	prepared := time.Since(prepStart)

	var nw *loadtest.Network
	switch {
	case *cluster:
		nw, err = loadtest.Cluster(3, 10*time.Second)
	case *url != "":
		nw, err = loadtest.External(*url)
	case *keep:
		store, serr := os.MkdirTemp("", "bunchsieve-loadtest-store-")
		if serr != nil {
			return fmt.Errorf("capture store: %w", serr)
		}
		defer os.RemoveAll(store)
		nw, err = loadtest.EmbeddedStore(store)
	default:
		nw, err = loadtest.Embedded()
	}
	if err != nil {
		return err
	}
	defer nw.Close()

	lc := loadtest.Config{
		Dataset: ds, Origin: origin, PreparedIn: prepared, Network: nw, Menu: menu, Workers: *workers, Linger: *linger,
		Rates: offered, Duration: *duration, Crossings: *crossings, Refine: *refine, Half: *half,
		P99Bound: *p99, Drain: *drain, BaselineRuns: *baselineRuns, BaselineLength: *baselineLength, Progress: progress,
		SubjectPrefix: cfg.SubjectPrefix, ProbeCores: true, Capture: *keep,
	}
	if !set["subject-prefix"] {
		lc.SubjectPrefix = "loadtest"
	}
	if *baselineRuns == 0 {
		lc.BaselineRuns = -1
	}
	if *soak > 0 {
		lc.Duration, lc.KeepMemory, lc.MemoryEvery, lc.BaselineRuns = *soak, true, time.Second, -1
	}
	old := debug.SetGCPercent(*gogc)
	defer debug.SetGCPercent(old)
	lc.Instrument = func() (func(), error) {
		if err := prof.start(); err != nil {
			return nil, err
		}
		if err := tr.start(); err != nil {
			return nil, err
		}
		return func() { prof.stop(); tr.stop() }, nil
	}
	rep, runErr := loadtest.Run(ctx, lc)
	if rep != nil {
		rep.Command = "bunchsieve loadtest " + strings.Join(args, " ")
		rep.Print(e.stdout)
		if *jsonPath != "" {
			if err := rep.WriteJSON(*jsonPath); err != nil {
				return err
			}
		}
		if *pngPath != "" {
			if err := rep.WritePNG(*pngPath); err != nil {
				return err
			}
		}
	}
	return errors.Join(runErr, prof.stop(), tr.stop())
}

// defaultSweep is the offered rates of a load test given neither --rate
// nor --rates.
const defaultSweep = "20k:200k:20k"

// parseRate reads a rate in crossings/s, with an optional k or M suffix.
func parseRate(s string) (float64, error) {
	mult := 1.0
	switch {
	case strings.HasSuffix(s, "k"):
		mult, s = 1e3, strings.TrimSuffix(s, "k")
	case strings.HasSuffix(s, "M"):
		mult, s = 1e6, strings.TrimSuffix(s, "M")
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !(v >= 0) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("want a rate >= 0 such as 50000 or 50k")
	}
	return v * mult, nil
}

// parseRates reads a comma-separated list of rates or a sweep
// FROM:TO:STEP (both ends included).
func parseRates(s string) ([]float64, error) {
	if parts := strings.Split(s, ":"); len(parts) == 3 {
		var v [3]float64
		for i, p := range parts {
			r, err := parseRate(p)
			if err != nil {
				return nil, err
			}
			v[i] = r
		}
		from, to, step := v[0], v[1], v[2]
		if step <= 0 || to < from || (to-from)/step > 1000 {
			return nil, fmt.Errorf("want FROM:TO:STEP with FROM <= TO, STEP > 0 and at most 1000 steps")
		}
		var out []float64
		for r := from; r <= to+step/1e6; r += step {
			out = append(out, math.Round(r))
		}
		return out, nil
	}
	var out []float64
	for _, p := range strings.Split(s, ",") {
		r, err := parseRate(strings.TrimSpace(p))
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, nil
}
